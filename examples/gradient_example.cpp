// Exact derivative of the HOMO of 1D "helium" with respect to the depth of a Gaussian well,
// by one adjoint solve through the converged SCF, checked against a central difference.
#include <cmath>
#include <cstdio>

#include "stillpoint/response/converged_state.hpp"
#include "stillpoint/ks/grid_presets.hpp"

using namespace stillpoint;

static SystemSpec helium(double depth) {
  SystemSpec s;
  s.geometry = Geometry::Line;
  s.xc = {"lda_x_1d_soft", "lda_c_1d_csc"};
  s.line.nuclei = {{2.0, 0.0, 1.0}};
  ExternalTerm well;
  well.kind = ExternalTerm::Kind::Gaussian;
  well.depth = depth;
  well.width = 1.5;
  s.line.potentials = {well};
  s.grid = grid_preset(Geometry::Line, "default");
  return s;
}

int main() {
  const double depth = 0.2;
  const ConvergedState st(helium(depth));
  // dL/deps for L = eps_HOMO: 1 for the HOMO level, 0 elsewhere.
  std::vector<double> dL_deps(st.solution().levels.size(), 0.0);
  for (std::size_t i = 0; i < dL_deps.size(); ++i)
    if (st.solution().levels[i].occupation > 0) dL_deps[i] = 1.0;
  const std::vector<Eigen::VectorXd> no_density(1, Eigen::VectorXd::Zero(st.problem().mesh().num_nodes()));
  const auto zeta = st.adjoint(no_density, dL_deps);
  // dV/d(depth) = -exp(-x^2 / (2 w^2)) at every node.
  Eigen::VectorXd dV = st.problem().mesh().x().unaryExpr([](double x) { return -std::exp(-x * x / (2 * 1.5 * 1.5)); });
  const double analytic = st.contract(zeta, {dV});
  ScfOptions tight;
  tight.potential_tolerance = 1e-12;
  const double h = 1e-4;
  const double fd = (ConvergedState(helium(depth + h), tight).eigenvalue("homo") -
                     ConvergedState(helium(depth - h), tight).eigenvalue("homo")) / (2 * h);
  std::printf("HOMO = %.10f Ha; d HOMO / d depth: adjoint %.10f, central difference %.10f\n", st.eigenvalue("homo"),
              analytic, fd);
  return std::abs(analytic - fd) < 1e-6 * std::abs(fd) + 1e-9 ? 0 : 1;
}
