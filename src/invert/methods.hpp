#pragma once
// The two inversion methods as steps of one driver (inversion.cpp): each gives, for one spin,
// the gradient of its objective with respect to the potential correction Δ on every node and
// the step that the driver's line search then scales. Both share the target handling
// (target.cpp), the non-interacting map and its χ0, the smoothness penalty ½ α Δᵀ K Δ and the
// α schedule. See docs/theory.md §7.
//
// A is the interior block of χ0 = ∂n/∂v (negative semi-definite), r = n − n_t on the interior
// nodes, W the density weights on all N nodes, K the penalty stiffness (N × N).
#include <Eigen/Dense>
#include <vector>

namespace stillpoint::inversion_detail {

/// Wu–Yang (Q. Wu and W. Yang, J. Chem. Phys. 118, 2498 (2003)): the Lagrangian
/// W[v] = E_s[v] − ∫ v n_t is maximized; objective −W + penalty, minimized. Newton step on
/// (αK − A + γ 11ᵀ) d = −g with g = αKΔ − W r; γ 11ᵀ fixes the constant, which changes
/// neither the density nor the penalty.
void wu_yang_step(const Eigen::MatrixXd& A, const Eigen::VectorXd& r, const Eigen::VectorXd& W, const Eigen::MatrixXd& K,
                  const Eigen::VectorXd& delta, double alpha, Eigen::VectorXd& d, Eigen::VectorXd& g);
/// −W[v] = −(band energy) + Σ_s ∫ v_s n_t,s.
double wu_yang_objective(double band, const Eigen::VectorXd& W, const std::vector<Eigen::VectorXd>& v,
                         const std::vector<Eigen::VectorXd>& target);

/// Direct minimization of ½‖n − n_t‖²_W + penalty: gradient g = αKΔ + A r (the adjoint of the
/// density error), Gauss–Newton step (A W⁻¹ A + αK + γ 11ᵀ) d = −g by Jacobi-preconditioned
/// CG to a forcing tolerance tied to the gradient (inexact Newton). `J` is the current
/// objective; returns the CG iterations used.
int direct_step(const Eigen::MatrixXd& A, const Eigen::VectorXd& r, const Eigen::VectorXd& W, const Eigen::MatrixXd& K,
                const Eigen::VectorXd& delta, double alpha, double J, int max_krylov, Eigen::VectorXd& d,
                Eigen::VectorXd& g);
/// ½ Σ_s ‖n_s − n_t,s‖²_W.
double direct_objective(const Eigen::VectorXd& W, const std::vector<Eigen::VectorXd>& density,
                        const std::vector<Eigen::VectorXd>& target);

}  // namespace stillpoint::inversion_detail
