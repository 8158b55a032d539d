#include "stillpoint/response/converged_state.hpp"

#include "stillpoint/common/errors.hpp"

#include <cmath>

namespace stillpoint {

ConvergedState::ConvergedState(const SystemSpec& spec, const ScfOptions& scf, const ResponseOptions& response)
    : problem_(spec), solution_(solve_scf(problem_, scf)) {
  response_ = std::make_unique<Response>(problem_, solution_, response);
}

ConvergedState::ConvergedState(const SystemSpec& spec, const ScfOptions& scf, const ResponseOptions& response,
                               const KsSolution* start)
    : problem_(spec), solution_(solve_scf(problem_, scf, start)) {
  response_ = std::make_unique<Response>(problem_, solution_, response);
}

double ConvergedState::eigenvalue(const std::string& label, int spin) const {
  const bool any = problem_.nspin() == 1;
  double best = std::numeric_limits<double>::quiet_NaN();
  if (label == "homo") {
    for (const Level& lv : solution_.levels)
      if ((any || lv.spin == spin) && lv.occupation > 0 && !(lv.energy <= best)) best = lv.energy;
  } else if (label == "lumo") {
    const double homo = eigenvalue("homo", spin);
    for (const Level& lv : solution_.levels)
      if ((any || lv.spin == spin) && lv.occupation == 0 && lv.energy > homo && !(lv.energy >= best)) best = lv.energy;
  } else {
    for (const Level& lv : solution_.levels)
      if ((any || lv.spin == spin) && lv.label == label) best = lv.energy;
  }
  if (std::isnan(best)) throw InputError("no level '" + label + "' with spin " + std::to_string(spin));
  return best;
}

ConvergedState::Tangent ConvergedState::tangent(const std::vector<Eigen::VectorXd>& dV) const {
  const Response& R = *response_;
  const Eigen::VectorXd vdot = R.solve_tangent(R.pack(dV));
  Tangent t;
  t.density = R.unpack(R.chi0(vdot));
  for (const Level& lv : solution_.levels) t.eigenvalues.push_back(R.dot(R.eigenvalue_gradient(lv.channel, lv.index), vdot));
  return t;
}

std::vector<Eigen::VectorXd> ConvergedState::adjoint(const std::vector<Eigen::VectorXd>& dL_dn,
                                                     const std::vector<double>& dL_deps) const {
  const Response& R = *response_;
  Eigen::VectorXd g = R.chi0(R.pack(dL_dn));
  for (std::size_t i = 0; i < dL_deps.size() && i < solution_.levels.size(); ++i)
    if (dL_deps[i] != 0.0)
      g += dL_deps[i] * R.eigenvalue_gradient(solution_.levels[i].channel, solution_.levels[i].index);
  return R.unpack(R.solve_adjoint(g));
}

double ConvergedState::contract(const std::vector<Eigen::VectorXd>& zeta, const std::vector<Eigen::VectorXd>& dV) const {
  const Response& R = *response_;
  return R.dot(R.pack(zeta), R.pack(dV));
}

namespace {

void count_solve(const Response& R, ConvergedState::SolveCount* count) {
  if (!count) return;
  ++count->linear_solves;
  count->krylov_iterations += R.last_iterations();
  count->max_linear_residual = std::max(count->max_linear_residual, R.last_residual());
}

}  // namespace

Eigen::VectorXd ConvergedState::vector_jacobian(const std::vector<ParameterRef>& params, const Cotangent& w,
                                                SolveCount* count) const {
  const Response& R = *response_;
  const int np = static_cast<int>(params.size());
  const int N = problem_.mesh().num_nodes();
  const Eigen::VectorXd& W = problem_.mesh().density_weight();
  if (w.density.size() != 0 && w.density.size() != N)
    throw InputError("density cotangent has " + std::to_string(w.density.size()) + " values; the mesh has " +
                     std::to_string(N) + " nodes");
  if (w.levels.size() > solution_.levels.size())
    throw InputError("level cotangent has " + std::to_string(w.levels.size()) + " values; the solution has " +
                     std::to_string(solution_.levels.size()) + " levels");
  Eigen::VectorXd grad = Eigen::VectorXd::Zero(np);
  if (w.energy != 0.0)
    for (int p = 0; p < np; ++p) grad(p) += w.energy * explicit_energy_derivative(problem_, solution_, params[p]);

  // The plain nodal weights become a W-gradient (the inner product of potential space is
  // W-weighted), which exists only where the node is a variable with positive weight.
  bool any = false;
  Eigen::VectorXd dn_w = Eigen::VectorXd::Zero(N);
  if (w.density.size() == N) {
    const std::vector<Eigen::VectorXd> mask = R.unpack(R.pack(std::vector<Eigen::VectorXd>(R.nspin(), Eigen::VectorXd::Ones(N))));
    for (int k = 0; k < N; ++k) {
      const double c = w.density(k);
      if (!std::isfinite(c)) throw InputError("density cotangent at node " + std::to_string(k) + " is not finite");
      if (c == 0.0) continue;
      if (mask[0](k) == 0.0 || !(W(k) > 0.0))
        throw InputError("density cotangent is " + std::to_string(c) + " at node " + std::to_string(k) +
                         ", where the density is not a variable of the discrete problem (a boundary node or r = 0, "
                         "zero quadrature weight); its derivative is zero by construction, so give it weight 0");
      dn_w(k) = c / W(k);
      any = true;
    }
  }
  Eigen::VectorXd g = Eigen::VectorXd::Zero(R.size());
  if (any) g = R.chi0(R.pack(std::vector<Eigen::VectorXd>(R.nspin(), dn_w)));
  for (std::size_t i = 0; i < w.levels.size(); ++i) {
    if (!std::isfinite(w.levels[i])) throw InputError("level cotangent " + std::to_string(i) + " is not finite");
    if (w.levels[i] == 0.0) continue;
    g += w.levels[i] * R.eigenvalue_gradient(solution_.levels[i].channel, solution_.levels[i].index);
    any = true;
  }
  if (!any) return grad;
  const Eigen::VectorXd zeta = R.solve_adjoint(g);
  count_solve(R, count);
  for (int p = 0; p < np; ++p) grad(p) += R.dot(zeta, R.pack(parameter_potential(problem_, solution_, params[p])));
  return grad;
}

ConvergedState::OutputTangent ConvergedState::jacobian_vector(const std::vector<ParameterRef>& params,
                                                              const Eigen::VectorXd& theta_dot, SolveCount* count) const {
  const Response& R = *response_;
  if (theta_dot.size() != static_cast<Eigen::Index>(params.size()))
    throw InputError("direction has " + std::to_string(theta_dot.size()) + " values for " +
                     std::to_string(params.size()) + " parameters");
  const int N = problem_.mesh().num_nodes();
  OutputTangent out;
  std::vector<Eigen::VectorXd> dV(problem_.nspin(), Eigen::VectorXd::Zero(N));
  for (std::size_t p = 0; p < params.size(); ++p) {
    if (theta_dot(p) == 0.0) continue;
    out.energy += theta_dot(p) * explicit_energy_derivative(problem_, solution_, params[p]);
    const auto v = parameter_potential(problem_, solution_, params[p]);
    for (int s = 0; s < problem_.nspin(); ++s) dV[s] += theta_dot(p) * v[s];
  }
  const Eigen::VectorXd vdot = R.solve_tangent(R.pack(dV));
  count_solve(R, count);
  const auto dn = R.unpack(R.chi0(vdot));
  out.density = Eigen::VectorXd::Zero(N);
  for (const auto& d : dn) out.density += d;
  for (const Level& lv : solution_.levels) out.levels.push_back(R.dot(R.eigenvalue_gradient(lv.channel, lv.index), vdot));
  return out;
}

}  // namespace stillpoint
