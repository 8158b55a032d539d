// Implicit gradients through the SCF fixed point against central finite differences of the
// whole converged program (docs/theory.md §6.5: every analytic derivative
// path must agree with finite differences of the full program; this is the standard test of
// implicit differentiation, common practice). Richardson-extrapolated central differences at
// a tight SCF tolerance are the reference; tangent and adjoint must agree to 1e-10.
#include <gtest/gtest.h>

#include <cmath>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/response/gradient.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace sp = stillpoint;

namespace {

sp::ScfOptions tight() {
  sp::ScfOptions o;
  // Radial potentials reach ~Z/r_1 near the nucleus; 1e-12 is above their rounding floor.
  o.potential_tolerance = 1e-12;
  o.energy_tolerance = 1e-13;
  o.eigenvalue_tolerance = 1e-12;
  o.max_iterations = 400;
  return o;
}

sp::ParameterRef param(sp::ParameterRef::Kind k, int index, const char* field, const char* name) {
  sp::ParameterRef r;
  r.kind = k;
  r.index = index;
  r.field = field;
  r.name = name;
  return r;
}

// A 1D two-centre system in a Gaussian well (our own demo scenario).
sp::SystemSpec line_system(bool polarized, bool gga) {
  sp::SystemSpec s;
  s.name = "line";
  s.geometry = sp::Geometry::Line;
  s.spin_polarized = polarized;
  // The GGA case uses the 3D PBE and PW92 forms as model families: libxc refuses 3D functionals on
  // the line, but the model forms exercise the same weak-form GGA machinery.
  s.xc = gga ? std::vector<std::string>{"model:pbe_x", "model:pw92_c"} : std::vector<std::string>{"lda_x_1d_soft", "lda_c_1d_csc"};
  s.line.nuclei = {{2.0, 0.0, 1.0}, {1.0, 1.5, 1.2}};
  s.charge = polarized ? 0.0 : 1.0;  // 3 electrons polarized (2 up, 1 down), 2 unpolarized
  sp::ExternalTerm g;
  g.kind = sp::ExternalTerm::Kind::Gaussian;
  g.depth = 0.3;
  g.center = 0.5;
  g.width = 1.2;
  sp::ExternalTerm h;
  h.kind = sp::ExternalTerm::Kind::Harmonic;
  h.omega = 0.05;
  h.center = 0.2;
  s.line.potentials = {g, h};
  s.grid = sp::grid_preset(sp::Geometry::Line, "default");
  s.grid.half_width = 20.0;
  return s;
}

sp::SystemSpec atom(int Z, bool polarized, bool gga) {
  sp::SystemSpec s;
  s.name = "atom";
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = Z;
  s.atom.configuration = sp::parse_configuration(sp::default_configuration(Z, 0));
  s.spin_polarized = polarized;
  s.xc = gga ? std::vector<std::string>{"gga_x_pbe", "gga_c_pbe"} : std::vector<std::string>{"lda_x", "lda_c_pw"};
  s.grid = sp::grid_preset(sp::Geometry::Radial, "default");
  return s;
}

// Reference density: the same system solved with a perturbed parameter set.
std::vector<double> reference_density(sp::SystemSpec s) {
  if (s.geometry == sp::Geometry::Line)
    s.line.potentials[0].depth += 0.2;
  else {
    s.xc_weights.resize(s.xc.size(), 1.0);
    s.xc_weights[0] *= 1.05;
    s.xc_weights[1] *= 0.9;
  }
  sp::KsProblem P(s);
  const auto S = sp::solve_scf(P);
  const Eigen::VectorXd n = S.total_density();
  return {n.data(), n.data() + n.size()};
}

std::vector<sp::LossTerm> all_outputs(const sp::SystemSpec& s) {
  sp::LossTerm d;
  d.kind = sp::LossTerm::Kind::Density;
  d.reference = reference_density(s);
  d.weight = 10.0;
  d.name = "density";
  sp::LossTerm e;
  e.kind = sp::LossTerm::Kind::Energy;
  e.target = s.geometry == sp::Geometry::Line ? -3.0 : -130.0;
  e.name = "energy";
  sp::LossTerm h;
  h.kind = sp::LossTerm::Kind::Eigenvalue;
  h.state = "homo";
  h.target = -0.7;
  h.name = "homo";
  sp::LossTerm l;
  l.kind = sp::LossTerm::Kind::Eigenvalue;
  l.state = s.geometry == sp::Geometry::Line ? "lumo" : "1s";  // atoms carry no empty states
  l.weight = 0.5;
  l.name = "lumo";
  return {d, e, h, l};
}

void expect_gradients_agree(const std::vector<sp::SystemSpec>& systems, const std::vector<sp::ParameterRef>& params,
                            const std::vector<sp::LossTerm>& loss, sp::ResponseOptions::Chi0Method chi0,
                            const std::string& what) {
  sp::GradientOptions adj;
  adj.scf = tight();
  adj.response.chi0 = chi0;
  sp::GradientOptions tan = adj;
  tan.mode = sp::GradientOptions::Mode::Tangent;
  sp::GradientProblem A(systems, params, loss, adj), T(systems, params, loss, tan);
  const Eigen::VectorXd theta = A.initial_values();
  const auto ra = A.evaluate(theta);
  const auto rt = T.evaluate(theta);
  // Richardson-extrapolated steps of 1e-3 keep SCF noise (~1e-13 per solve) far below the tolerance.
  const Eigen::VectorXd steps = sp::default_fd_steps(params, theta, 1e-3);
  const Eigen::VectorXd fd = A.finite_difference_gradient(theta, steps, tight());
  for (int p = 0; p < theta.size(); ++p) {
    SCOPED_TRACE(what + " parameter " + params[p].name);
    const double scale = std::max(std::abs(fd(p)), 1e-3);
    EXPECT_NEAR(ra.gradient(p), fd(p), 1e-6 * scale + 1e-9);
    EXPECT_NEAR(ra.gradient(p), rt.gradient(p), 1e-10 * std::max(std::abs(ra.gradient(p)), 1e-2));
  }
}

std::vector<sp::ParameterRef> line_parameters() {
  using K = sp::ParameterRef::Kind;
  return {param(K::XcWeight, 0, "", "w_x"),          param(K::XcWeight, 1, "", "w_c"),
          param(K::Gaussian, 0, "depth", "depth"),   param(K::Gaussian, 0, "center", "center"),
          param(K::Gaussian, 0, "width", "width"),   param(K::Harmonic, 1, "omega", "omega"),
          param(K::Harmonic, 1, "center", "hcenter"), param(K::Nucleus, 1, "charge", "Z1"),
          param(K::Nucleus, 1, "position", "X1"),    param(K::Nucleus, 0, "softening", "a0"),
          param(K::GridPotential, 240, "", "v[240]")};
}

}  // namespace

TEST(ImplicitGradient, LineLdaUnpolarized) {
  const auto s = line_system(false, false);
  expect_gradients_agree({s}, line_parameters(), all_outputs(s), sp::ResponseOptions::Chi0Method::SumOverStates, "line LDA unpolarized");
}

TEST(ImplicitGradient, LineLdaPolarizedSternheimer) {
  const auto s = line_system(true, false);
  expect_gradients_agree({s}, line_parameters(), all_outputs(s), sp::ResponseOptions::Chi0Method::Sternheimer, "line LSD");
}

TEST(ImplicitGradient, LineGgaUnpolarizedSternheimer) {
  const auto s = line_system(false, true);
  expect_gradients_agree({s}, line_parameters(), all_outputs(s), sp::ResponseOptions::Chi0Method::Sternheimer, "line GGA");
}

TEST(ImplicitGradient, LineGgaPolarized) {
  const auto s = line_system(true, true);
  expect_gradients_agree({s}, line_parameters(), all_outputs(s), sp::ResponseOptions::Chi0Method::SumOverStates, "line spin GGA");
}

TEST(ImplicitGradient, AtomLdaUnpolarized) {
  using K = sp::ParameterRef::Kind;
  const auto s = atom(10, false, false);
  expect_gradients_agree({s}, {param(K::XcWeight, 0, "", "w_x"), param(K::XcWeight, 1, "", "w_c")}, all_outputs(s),
                         sp::ResponseOptions::Chi0Method::SumOverStates, "Ne LDA");
}

TEST(ImplicitGradient, AtomGgaPolarizedOpenShell) {
  using K = sp::ParameterRef::Kind;
  const auto s = atom(7, true, true);  // N: 2p3, all majority
  expect_gradients_agree({s}, {param(K::XcWeight, 0, "", "w_x"), param(K::XcWeight, 1, "", "w_c")}, all_outputs(s),
                         sp::ResponseOptions::Chi0Method::SumOverStates, "N PBE");
}

TEST(ImplicitGradient, AtomLdaPolarizedAndGgaUnpolarized) {
  using K = sp::ParameterRef::Kind;
  for (bool pol : {true, false}) {
    const auto s = atom(8, pol, !pol);
    expect_gradients_agree({s}, {param(K::XcWeight, 0, "", "w_x"), param(K::XcWeight, 1, "", "w_c")}, all_outputs(s),
                           sp::ResponseOptions::Chi0Method::SumOverStates, pol ? "O LSD" : "O GGA");
  }
}

// Energy differences between systems: a 1D ionization energy E(cation) - E(neutral).
TEST(ImplicitGradient, IonizationEnergyAcrossSystems) {
  using K = sp::ParameterRef::Kind;
  sp::SystemSpec neutral = line_system(true, false);
  neutral.name = "neutral";
  sp::SystemSpec cation = neutral;
  cation.name = "cation";
  cation.charge = 1.0;
  sp::LossTerm ip;
  ip.kind = sp::LossTerm::Kind::EnergyDifference;
  ip.system = 1;
  ip.system_b = 0;
  ip.target = 0.5;
  ip.name = "IP";
  sp::LossTerm homo;
  homo.kind = sp::LossTerm::Kind::Eigenvalue;
  homo.system = 1;
  homo.state = "homo";
  homo.name = "cation homo";
  expect_gradients_agree({neutral, cation},
                         {param(K::XcWeight, 0, "", "w_x"), param(K::Gaussian, 0, "depth", "depth"),
                          param(K::Nucleus, 0, "position", "X0")},
                         {ip, homo}, sp::ResponseOptions::Chi0Method::Automatic, "ionization energy");
}

// Total energies by stationarity need no linear solve (docs/theory.md §6).
TEST(ImplicitGradient, EnergyNeedsNoLinearSolve) {
  using K = sp::ParameterRef::Kind;
  const auto s = atom(10, false, false);
  sp::LossTerm e;
  e.kind = sp::LossTerm::Kind::Energy;
  sp::GradientProblem G({s}, {param(K::XcWeight, 0, "", "w_x")}, {e});
  const auto r = G.evaluate(G.initial_values());
  EXPECT_EQ(r.linear_solves, 0);
  // dE/d(weight of lda_x) = E_x[n] (Hellmann–Feynman); for Xα this is dE/dα = (3/2) E_x^LDA
  // (check-values.md §6b); here the weight multiplies E_x directly.
  sp::KsProblem P(s);
  const auto S = sp::solve_scf(P);
  sp::XcSettings xs;
  const sp::XcFunctional x = sp::make_functional({"lda_x"}, xs);
  EXPECT_NEAR(r.gradient(0), sp::xc_energy(P.mesh(), x, S.density, P.density_threshold()), 1e-9);
}

// chi0 by projected Sternheimer solves equals the full sum over states to solver tolerance
// (docs/theory.md §5).
TEST(Chi0, SternheimerEqualsSumOverStates) {
  for (bool pol : {false, true}) {
    const auto s = line_system(pol, false);
    sp::KsProblem P(s);
    const auto S = sp::solve_scf(P, tight());
    sp::ResponseOptions sos, st;
    sos.chi0 = sp::ResponseOptions::Chi0Method::SumOverStates;
    st.chi0 = sp::ResponseOptions::Chi0Method::Sternheimer;
    const sp::Response A(P, S, sos), B(P, S, st);
    Eigen::VectorXd dv(A.size());
    for (int i = 0; i < dv.size(); ++i) dv(i) = std::sin(0.37 * i) * std::exp(-std::pow((i % A.interior()) - 240.0, 2) / 5000.0);
    const Eigen::VectorXd a = A.chi0_sum_over_states(dv), b = B.chi0_sternheimer(dv);
    EXPECT_LT((a - b).cwiseAbs().maxCoeff(), 1e-10 * a.cwiseAbs().maxCoeff());
    // chi0 is self-adjoint and negative semi-definite in the weighted inner product.
    Eigen::VectorXd dw = dv.reverse();
    EXPECT_NEAR(A.dot(dw, A.chi0(dv)), A.dot(dv, A.chi0(dw)), 1e-12 * std::abs(A.dot(dv, A.chi0(dv))));
    EXPECT_LT(A.dot(dv, A.chi0(dv)), 0.0);
  }
}

TEST(ImplicitGradient, DegenerateStatesWithDifferentOccupationsAreReported) {
  // Two identical wells far apart: the two lowest states are degenerate to ~1e-12; occupying
  // only one of them makes the derivative ill-posed, which must be an error with numbers.
  sp::SystemSpec s;
  s.geometry = sp::Geometry::Line;
  s.line.interacting = false;
  sp::ExternalTerm a, b;
  a.kind = b.kind = sp::ExternalTerm::Kind::Gaussian;
  a.depth = b.depth = 1.0;
  a.width = b.width = 0.5;
  a.center = -12.0;
  b.center = 12.0;
  s.line.potentials = {a, b};
  s.charge = -1.0;  // no nuclei: one electron
  s.spin_polarized = true;
  s.n_up = 1.0;
  s.n_down = 0.0;
  s.grid = sp::grid_preset(sp::Geometry::Line, "default");
  sp::KsProblem P(s);
  const auto S = sp::solve_scf(P);
  try {
    sp::Response R(P, S);
    ADD_FAILURE() << "no error for degenerate states with occupations 1 and 0";
  } catch (const sp::NumericalError& e) {
    // The message names both states, the gap and the two occupations.
    const std::string what = e.what();
    EXPECT_NE(what.find("ill-posed"), std::string::npos) << what;
    EXPECT_NE(what.find("states 1 and 2"), std::string::npos) << what;
    EXPECT_NE(what.find("occupations 1 and 0"), std::string::npos) << what;
    const double gap = std::abs(S.states[0].energies(1) - S.states[0].energies(0));
    EXPECT_LT(gap, 1e-6);
    EXPECT_NE(what.find("by only "), std::string::npos) << what;
  }
}

namespace {
sp::ParameterRef model_param(int term, int sub, const char* name) {
  sp::ParameterRef r;
  r.kind = sp::ParameterRef::Kind::XcParameter;
  r.index = term;
  r.sub = sub;
  r.field = name;
  r.name = name;
  return r;
}
}  // namespace

// Model-family parameters (exact by jets) through the SCF, both spin settings.
TEST(ImplicitGradient, LineModelParameters) {
  for (bool pol : {false, true}) {
    sp::SystemSpec s = line_system(pol, false);
    s.xc = {"model:soft_x_1d", "model:rational_c_1d"};
    expect_gradients_agree({s},
                           {model_param(0, 0, "alpha"), model_param(1, 0, "a1"), model_param(1, 3, "b2"),
                            param(sp::ParameterRef::Kind::XcWeight, 1, "", "w_c")},
                           all_outputs(s), sp::ResponseOptions::Chi0Method::Automatic, pol ? "line model LSD" : "line model");
  }
}

TEST(ImplicitGradient, AtomModelParametersGga) {
  for (bool pol : {false, true}) {
    sp::SystemSpec s = atom(pol ? 7 : 10, pol, true);
    s.xc = {"model:pbe_x", "model:pw92_c"};
    expect_gradients_agree({s}, {model_param(0, 0, "kappa"), model_param(0, 1, "mu"), model_param(1, 0, "A0"), model_param(1, 2, "b1_0")},
                           all_outputs(s), sp::ResponseOptions::Chi0Method::SumOverStates, pol ? "N model" : "Ne model");
  }
}

TEST(ImplicitGradient, AtomB88AndSeriesParameters) {
  sp::SystemSpec s = atom(8, true, true);
  s.xc = {"model:b88_x", "model:series_x", "lda_c_pw"};
  s.xc_weights = {0.5, 0.5, 1.0};
  expect_gradients_agree({s}, {model_param(0, 0, "beta"), model_param(1, 1, "c1"), model_param(1, 2, "c2")}, all_outputs(s),
                         sp::ResponseOptions::Chi0Method::SumOverStates, "O B88/series");
}

// The external potential at grid nodes of a radial atom (many-parameter family), both spins.
TEST(ImplicitGradient, AtomGridPotential) {
  for (bool pol : {false, true}) {
    const auto s = atom(pol ? 7 : 10, pol, !pol);
    std::vector<sp::ParameterRef> ps;
    for (int k : {20, 90, 160, 200}) ps.push_back(param(sp::ParameterRef::Kind::GridPotential, k, "", ("v" + std::to_string(k)).c_str()));
    expect_gradients_agree({s}, ps, all_outputs(s), sp::ResponseOptions::Chi0Method::Automatic, pol ? "N grid" : "Ne grid");
  }
}

// BLYP through the SCF: the weights of the B88 and LYP terms, closed and open shell.
TEST(ImplicitGradient, AtomBlypWeights) {
  for (bool pol : {false, true}) {
    sp::SystemSpec s = atom(pol ? 7 : 10, pol, true);
    s.xc = {"gga_x_b88", "gga_c_lyp"};
    expect_gradients_agree({s},
                           {param(sp::ParameterRef::Kind::XcWeight, 0, "", "w_b88"),
                            param(sp::ParameterRef::Kind::XcWeight, 1, "", "w_lyp")},
                           all_outputs(s), sp::ResponseOptions::Chi0Method::Automatic, pol ? "N BLYP" : "Ne BLYP");
  }
}

// The tangent mode with one direction per interior node of a Ne grid (431 parameters), at the
// default options a user gets: it once failed in Sternheimer CG at a 3.8e-11 relative residual.
// The adjoint mode gives the same gradient (one solve instead of 431); FD of a few of these
// components is AtomGridPotential above.
TEST(ImplicitGradient, AtomTangentModeOnEveryGridNode) {
  const auto s = atom(10, false, false);
  const int nodes = sp::Mesh::radial(s.grid, s.atom.Z).num_nodes();
  std::vector<sp::ParameterRef> ps;
  for (int k = 1; k + 1 < nodes; ++k) ps.push_back(param(sp::ParameterRef::Kind::GridPotential, k, "", "v"));
  ASSERT_EQ(ps.size(), 431u);
  sp::LossTerm e;
  e.kind = sp::LossTerm::Kind::Energy;
  e.target = -128.0;
  e.name = "energy";
  sp::LossTerm p;
  p.kind = sp::LossTerm::Kind::Eigenvalue;
  p.state = "2p";
  p.target = -0.5;
  p.name = "2p";
  sp::GradientOptions adj;
  sp::GradientOptions tan = adj;
  tan.mode = sp::GradientOptions::Mode::Tangent;
  sp::GradientProblem A({s}, ps, {e, p}, adj), T({s}, ps, {e, p}, tan);
  const Eigen::VectorXd theta = A.initial_values();
  const auto ra = A.evaluate(theta);
  const auto rt = T.evaluate(theta);
  const double scale = ra.gradient.cwiseAbs().maxCoeff();
  EXPECT_GT(scale, 1e-3);
  EXPECT_LT((ra.gradient - rt.gradient).cwiseAbs().maxCoeff(), 1e-10 * scale);
}

// Sternheimer solves that stop earlier as GMRES converges (relaxed inexact Krylov) give the
// gradient of solves at full accuracy, to far below what FD can see.
TEST(ImplicitGradient, RelaxedInnerSolvesGiveTheStrictGradient) {
  const auto s = line_system(true, true);
  sp::GradientOptions relaxed;
  relaxed.scf = tight();
  relaxed.response.chi0 = sp::ResponseOptions::Chi0Method::Sternheimer;
  sp::GradientOptions strict = relaxed;
  strict.response.relaxed_inner_tolerance = false;
  const auto params = line_parameters();
  sp::GradientProblem A({s}, params, all_outputs(s), relaxed), B({s}, params, all_outputs(s), strict);
  const Eigen::VectorXd theta = A.initial_values();
  const auto ra = A.evaluate(theta);
  const auto rb = B.evaluate(theta);
  const double scale = rb.gradient.cwiseAbs().maxCoeff();
  EXPECT_LT((ra.gradient - rb.gradient).cwiseAbs().maxCoeff(), 1e-10 * scale);
}
