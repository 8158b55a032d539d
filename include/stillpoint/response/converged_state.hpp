#pragma once
// The C++ face of implicit differentiation for one system: a converged Kohn–Sham state that
// returns values, and products with the Jacobian of its outputs (density, eigenvalues) with
// respect to its effective-potential perturbations, without unrolling the SCF.
//
//   stillpoint::ConvergedState st(spec);            // solves the SCF
//   double E = st.energy();                           // hartree
//   auto t = st.tangent(dV);                          // dV: dV/dtheta at fixed density (per spin)
//   t.density, t.eigenvalues                          // J * theta_dot
//   auto z = st.adjoint(dL_dn, dL_deps);              // J^T * w through one linear solve
//   double dL = st.contract(z, dV);                   // <zeta, dV/dtheta>, for any parameter
//
// For losses over several systems and named parameter families use GradientProblem
// (gradient.hpp), which is built on the same pieces.
#include <Eigen/Dense>
#include <memory>
#include <string>
#include <vector>

#include "stillpoint/response/response.hpp"
#include "stillpoint/ks/scf.hpp"

namespace stillpoint {

class ConvergedState {
 public:
  explicit ConvergedState(const SystemSpec& spec, const ScfOptions& scf = {}, const ResponseOptions& response = {});

  const KsProblem& problem() const { return problem_; }
  const KsSolution& solution() const { return solution_; }
  double energy() const { return solution_.energy.total; }
  /// Total density at every mesh node.
  Eigen::VectorXd density() const { return solution_.total_density(); }
  /// Energy of the level with this label ("2p", "3", or "homo"/"lumo") and spin (0 or 1).
  double eigenvalue(const std::string& label, int spin = 0) const;

  struct Tangent {
    std::vector<Eigen::VectorXd> density;  ///< per spin, every node
    std::vector<double> eigenvalues;       ///< in the order of solution().levels
  };
  /// Response of the outputs to a change dV of the Kohn–Sham map at fixed density (one linear
  /// solve of (I - K chi0)).
  Tangent tangent(const std::vector<Eigen::VectorXd>& dV) const;
  /// zeta solving (I - chi0 K) zeta = chi0 dL/dn + sum_i dL/deps_i |phi_i|^2; dL/dn is the
  /// weighted-inner-product gradient per spin at every node, dL/deps one value per level of
  /// solution().levels (or empty).
  std::vector<Eigen::VectorXd> adjoint(const std::vector<Eigen::VectorXd>& dL_dn, const std::vector<double>& dL_deps) const;
  /// <zeta, dV> in the weighted inner product: dL/dtheta for a parameter with dV/dtheta = dV.
  double contract(const std::vector<Eigen::VectorXd>& zeta, const std::vector<Eigen::VectorXd>& dV) const;

 private:
  KsProblem problem_;
  KsSolution solution_;
  std::unique_ptr<Response> response_;
};

}  // namespace stillpoint
