#pragma once
// Linear response of a converged Kohn–Sham solution: chi0, the Hartree-xc kernel K, and the
// implicit tangent and adjoint solves through the SCF fixed point.
//
// Vectors live in "potential space": one block per spin channel of the interior mesh nodes,
// with the quadrature-weighted inner product <a, b> = sum_s sum_k W_k a_sk b_sk in which chi0
// and K are self-adjoint. A density change is represented the same way (nodal values).
#include <Eigen/Dense>
#include <memory>
#include <string>
#include <vector>

#include "stillpoint/ks/scf.hpp"

namespace stillpoint {

struct ResponseOptions {
  enum class Chi0Method {
    Automatic,      ///< sum over states up to `sum_over_states_below` unknowns (measured slower above), else Sternheimer
    SumOverStates,  ///< all eigenpairs by dense LAPACK; exact for the discretization
    Sternheimer,    ///< projected Sternheimer solves (preconditioned CG) for the unoccupied space
  };
  Chi0Method chi0 = Chi0Method::Automatic;
  int sum_over_states_below = 200;
  /// Relative residual at which the Sternheimer CG solves stop. Inside GMRES the solves may
  /// stop earlier as the outer residual falls (relaxed inexact Krylov: products that enter
  /// the Krylov space late need less accuracy), never looser than 1e-4; the true residual of
  /// every restart and of the answer is computed at this tolerance.
  double sternheimer_tolerance = 1e-13;
  /// Off: every Sternheimer solve at sternheimer_tolerance.
  bool relaxed_inner_tolerance = true;
  int sternheimer_max_iterations = 2000;
  /// Relative residual at which GMRES on (I - K chi0) stops.
  double krylov_tolerance = 1e-12;
  /// When restarts stop improving the true residual (operator rounding, e.g. from very large
  /// kernels in the far tail), a residual below this is still accepted; above it is an error.
  double krylov_floor = 1e-8;
  int krylov_max_iterations = 200;
  /// Occupation differences between states closer than this (hartree) make chi0 ill-posed.
  double degeneracy_tolerance = 1e-7;
};

class Response {
 public:
  Response(const KsProblem& problem, const KsSolution& solution, ResponseOptions options = {});
  ~Response();

  /// Size of one potential-space vector (spins x interior nodes).
  int size() const;
  int nspin() const;
  int interior() const;
  /// W-weighted inner product.
  double dot(const Eigen::VectorXd& a, const Eigen::VectorXd& b) const;
  /// Potential-space vector from / to per-spin nodal vectors (boundary nodes dropped / zero).
  Eigen::VectorXd pack(const std::vector<Eigen::VectorXd>& per_spin) const;
  std::vector<Eigen::VectorXd> unpack(const Eigen::VectorXd& v) const;

  Eigen::VectorXd chi0(const Eigen::VectorXd& dv) const;
  Eigen::VectorXd chi0_sum_over_states(const Eigen::VectorXd& dv) const;
  /// `tolerance` < 0: sternheimer_tolerance.
  Eigen::VectorXd chi0_sternheimer(const Eigen::VectorXd& dv, double tolerance = -1.0) const;
  Eigen::VectorXd kernel(const Eigen::VectorXd& dn) const;
  /// d eps / d v of state `state` of channel `channel` as a potential-space gradient:
  /// d eps = <result, dv>.
  Eigen::VectorXd eigenvalue_gradient(int channel, int state) const;

  /// Solves (I - K chi0) x = b (tangent) or (I - chi0 K) x = b (adjoint). Throws
  /// NumericalError with the residual history if GMRES does not converge.
  Eigen::VectorXd solve_tangent(const Eigen::VectorXd& b) const;
  Eigen::VectorXd solve_adjoint(const Eigen::VectorXd& b) const;
  /// GMRES iterations used by the last solve, and its true relative residual.
  int last_iterations() const;
  double last_residual() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace stillpoint
