// Products with the Jacobian of one converged state (ConvergedState::vector_jacobian and
// ::jacobian_vector), the primitives behind the Python and PyTorch bindings, against central
// finite differences of the whole converged program (docs/theory.md §6.5; common practice for
// implicit differentiation) and against each other (<w, J e_p> = (J^T w)_p).
#include <gtest/gtest.h>

#include <cmath>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/response/converged_state.hpp"

namespace sp = stillpoint;

namespace {

sp::ScfOptions tight() {
  sp::ScfOptions o;
  o.potential_tolerance = 1e-12;
  o.energy_tolerance = 1e-13;
  o.eigenvalue_tolerance = 1e-12;
  o.max_iterations = 400;
  return o;
}

sp::ParameterRef param(sp::ParameterRef::Kind k, int index, const char* field) {
  sp::ParameterRef r;
  r.kind = k;
  r.index = index;
  r.field = field;
  r.name = field;
  return r;
}

// Our own scenario: a polarized three-electron line system, two soft nuclei and a Gaussian well.
sp::SystemSpec line_system() {
  sp::SystemSpec s;
  s.name = "line";
  s.geometry = sp::Geometry::Line;
  s.spin_polarized = true;
  s.xc = {"lda_x_1d_soft", "lda_c_1d_csc"};
  s.line.nuclei = {{2.0, 0.0, 1.0}, {1.0, 1.5, 1.2}};
  sp::ExternalTerm g;
  g.kind = sp::ExternalTerm::Kind::Gaussian;
  g.depth = 0.3;
  g.center = 0.5;
  g.width = 1.2;
  s.line.potentials = {g};
  s.grid = sp::grid_preset(sp::Geometry::Line, "default");
  s.grid.half_width = 16.0;
  return s;
}

// The linear functional of the outputs the products are taken with.
double functional(const sp::ConvergedState& st, const sp::ConvergedState::Cotangent& w) {
  double L = w.energy * st.energy();
  const Eigen::VectorXd n = st.density();
  if (w.density.size()) L += w.density.dot(n);
  for (std::size_t i = 0; i < w.levels.size(); ++i) L += w.levels[i] * st.solution().levels[i].energy;
  return L;
}

// Sets parameter p of a copy of `s` to its value + h (the fields the products differentiate).
sp::SystemSpec shifted(const sp::SystemSpec& s, const std::vector<sp::ParameterRef>& params, int p, double h) {
  Eigen::VectorXd theta = sp::parameter_values({s}, params);
  theta(p) += h;
  return sp::apply_parameters({s}, params, theta)[0];
}

// Richardson-extrapolated central difference of the whole program.
double fd(const sp::SystemSpec& s, const std::vector<sp::ParameterRef>& params, int p, double h,
          const sp::ConvergedState::Cotangent& w) {
  auto L = [&](double step) { return functional(sp::ConvergedState(shifted(s, params, p, step), tight()), w); };
  const double d1 = (L(h) - L(-h)) / (2 * h), d2 = (L(h / 2) - L(-h / 2)) / h;
  return (4 * d2 - d1) / 3;
}

// A smooth density weight W_k f(x_k) on the nodes that are variables, zero elsewhere.
Eigen::VectorXd smooth_weights(const sp::ConvergedState& st) {
  const sp::Mesh& m = st.problem().mesh();
  const int N = m.num_nodes();
  Eigen::VectorXd c = Eigen::VectorXd::Zero(N);
  for (int k = 1; k + 1 < N; ++k) c(k) = m.density_weight()(k) * std::exp(-0.25 * m.x()(k) * m.x()(k));
  return c;
}

}  // namespace

TEST(ConvergedStateProducts, LineVectorJacobianMatchesFiniteDifferencesAndTangent) {
  const sp::SystemSpec s = line_system();
  const int node = 200;
  const std::vector<sp::ParameterRef> params = {
      param(sp::ParameterRef::Kind::Gaussian, 0, "depth"), param(sp::ParameterRef::Kind::Nucleus, 1, "position"),
      param(sp::ParameterRef::Kind::XcWeight, 1, "weight"), param(sp::ParameterRef::Kind::GridPotential, node, "node")};
  sp::SystemSpec base = s;
  const sp::ConvergedState probe(s, tight());
  base.nodal_potential.assign(probe.problem().mesh().num_nodes(), 0.0);
  const sp::ConvergedState st(base, tight());

  sp::ConvergedState::Cotangent w;
  w.energy = 0.7;
  w.density = smooth_weights(st);
  w.levels.assign(st.solution().levels.size(), 0.0);
  w.levels[0] = 0.3;
  w.levels.back() = -0.2;
  sp::ConvergedState::SolveCount count;
  const Eigen::VectorXd g = st.vector_jacobian(params, w, &count);
  EXPECT_EQ(count.linear_solves, 1);  // one adjoint solve for all parameters
  EXPECT_LT(count.max_linear_residual, 1e-10);

  for (int p = 0; p < static_cast<int>(params.size()); ++p) {
    const double h = params[p].kind == sp::ParameterRef::Kind::GridPotential ? 5e-3 : 1e-3;
    const double ref = fd(base, params, p, h, w);
    EXPECT_NEAR(g(p), ref, 1e-7 * std::max(1.0, std::abs(ref))) << params[p].name;
    // The tangent product along e_p contracted with w is the same number.
    Eigen::VectorXd e = Eigen::VectorXd::Zero(params.size());
    e(p) = 1.0;
    const auto t = st.jacobian_vector(params, e);
    double dl = w.energy * t.energy + w.density.dot(t.density);
    for (std::size_t i = 0; i < w.levels.size(); ++i) dl += w.levels[i] * t.levels[i];
    EXPECT_NEAR(dl, g(p), 1e-10 * std::max(1.0, std::abs(g(p)))) << params[p].name;
  }
}

TEST(ConvergedStateProducts, AtomEnergyAndLevelsMatchFiniteDifferences) {
  sp::SystemSpec s;
  s.name = "Ne";
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = 10;
  s.atom.configuration = sp::parse_configuration(sp::default_configuration(10, 0));
  s.xc = {"lda_x", "lda_c_pw"};
  s.grid = sp::grid_preset(sp::Geometry::Radial, "default");
  const std::vector<sp::ParameterRef> params = {param(sp::ParameterRef::Kind::XcWeight, 0, "wx"),
                                                param(sp::ParameterRef::Kind::XcWeight, 1, "wc")};
  const sp::ConvergedState st(s, tight());
  sp::ConvergedState::Cotangent w;
  w.energy = 1.0;
  w.density = smooth_weights(st);
  w.levels.assign(st.solution().levels.size(), 0.0);
  w.levels.back() = 1.0;  // the 2p level
  const Eigen::VectorXd g = st.vector_jacobian(params, w);
  for (int p = 0; p < 2; ++p) {
    const double ref = fd(s, params, p, 1e-3, w);
    EXPECT_NEAR(g(p), ref, 1e-7 * std::max(1.0, std::abs(ref))) << params[p].name;
  }
  // Energy alone needs no solve (stationarity), and equals the xc energy of each term.
  sp::ConvergedState::Cotangent e;
  e.energy = 1.0;
  sp::ConvergedState::SolveCount count;
  const Eigen::VectorXd ge = st.vector_jacobian(params, e, &count);
  EXPECT_EQ(count.linear_solves, 0);
  EXPECT_NEAR(ge(0) + ge(1), st.solution().energy.xc, 1e-10);
}

TEST(ConvergedStateProducts, WeightOnANodeWithoutVariableIsRefused) {
  const sp::ConvergedState st(line_system());
  sp::ConvergedState::Cotangent w;
  w.density = Eigen::VectorXd::Zero(st.problem().mesh().num_nodes());
  w.density(0) = 1.0;  // the box edge, where the density is fixed at zero
  try {
    st.vector_jacobian({param(sp::ParameterRef::Kind::Gaussian, 0, "depth")}, w);
    FAIL() << "no error";
  } catch (const sp::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("node 0"), std::string::npos) << e.what();
  }
  w.density(0) = 0.0;
  w.density(5) = std::nan("");
  EXPECT_THROW(st.vector_jacobian({param(sp::ParameterRef::Kind::Gaussian, 0, "depth")}, w), sp::InputError);
}
