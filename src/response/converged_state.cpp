#include "stillpoint/response/converged_state.hpp"

#include "stillpoint/common/errors.hpp"

namespace stillpoint {

ConvergedState::ConvergedState(const SystemSpec& spec, const ScfOptions& scf, const ResponseOptions& response)
    : problem_(spec), solution_(solve_scf(problem_, scf)) {
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

}  // namespace stillpoint
