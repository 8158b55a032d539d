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

#include "stillpoint/response/gradient.hpp"
#include "stillpoint/response/response.hpp"
#include "stillpoint/ks/scf.hpp"

namespace stillpoint {

class ConvergedState {
 public:
  explicit ConvergedState(const SystemSpec& spec, const ScfOptions& scf = {}, const ResponseOptions& response = {});
  /// Same, starting the SCF from `start`: a converged solution of this system at nearby
  /// parameters (same mesh); null starts from the initial potential.
  ConvergedState(const SystemSpec& spec, const ScfOptions& scf, const ResponseOptions& response, const KsSolution* start);

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

  /// Linear-solve statistics of a product (GMRES on the Kohn–Sham response).
  struct SolveCount {
    int linear_solves = 0;
    int krylov_iterations = 0;
    double max_linear_residual = 0.0;  ///< largest true relative residual of the solves
  };

  /// A linear functional of the outputs, L = energy E + sum_k density_k n_k + sum_i levels_i eps_i,
  /// with n_k the total density at mesh node k (a plain sum, no quadrature weight) and eps_i the
  /// levels in the order of solution().levels. Empty density or levels mean zero.
  struct Cotangent {
    double energy = 0.0;
    Eigen::VectorXd density;
    std::vector<double> levels;
  };
  /// dL/dtheta for every parameter (vector-Jacobian product): one adjoint solve whatever the
  /// number of parameters, none when L depends on the energy only (stationarity). `system`
  /// of each ParameterRef is ignored. A density weight on a node the discrete problem has no
  /// variable for (boundary nodes, where the density is fixed, or r = 0, which has no
  /// quadrature weight) must be zero: InputError otherwise.
  Eigen::VectorXd vector_jacobian(const std::vector<ParameterRef>& params, const Cotangent& w,
                                  SolveCount* count = nullptr) const;

  /// Directional derivative of the outputs along theta_dot (Jacobian-vector product): one
  /// tangent solve. Returns dE, dn (total, every node) and d eps (levels order).
  struct OutputTangent {
    double energy = 0.0;
    Eigen::VectorXd density;
    std::vector<double> levels;
  };
  OutputTangent jacobian_vector(const std::vector<ParameterRef>& params, const Eigen::VectorXd& theta_dot,
                                SolveCount* count = nullptr) const;

 private:
  KsProblem problem_;
  KsSolution solution_;
  std::unique_ptr<Response> response_;
};

}  // namespace stillpoint
