#pragma once
// The discrete exchange-correlation energy of nodal spin densities on a mesh, and its exact
// gradient.
//
//   E_xc(n) = sum_e sum_q w_eq e(n_k(e,q), sigma_eq),   sigma_eq from (D_e n)_q,
//
// where w_eq are element quadrature weights (times 4 pi r^2 radially) and D_e the element's
// density derivative matrix. The potential is v_k = (dE_xc/dn_k) / W_k with W the density
// weights, the weak-form GGA potential: the same quadrature as the energy, so that the
// self-consistent energy is stationary and finite differences of E_xc reproduce v exactly.
#include <Eigen/Dense>
#include <vector>

#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/xc/functional.hpp"

namespace stillpoint {

struct XcOnMesh {
  double energy = 0.0;                    ///< hartree
  std::vector<Eigen::VectorXd> potential;  ///< per spin channel, hartree, at every node (0 where W = 0)
};

/// `density` holds one nodal vector per spin channel (1: total density, 2: up and down).
XcOnMesh evaluate_xc(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& density,
                     double density_threshold);

/// Energy only (cheaper bookkeeping, same numbers as evaluate_xc().energy).
double xc_energy(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& density,
                 double density_threshold);

}  // namespace stillpoint

namespace stillpoint {

/// The exchange-correlation kernel at a fixed density: the Hessian of the discrete E_xc,
/// applied as K_xc dn = (1/W) (d^2 E_xc / dn^2) dn, in the same weak form as the potential.
class XcKernel {
 public:
  XcKernel(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& density,
           double density_threshold);
  /// dv per spin at every node for the density change dn per spin.
  std::vector<Eigen::VectorXd> apply(const std::vector<Eigen::VectorXd>& dn) const;

 private:
  const Mesh* mesh_;
  int ns_ = 1;
  bool gradient_ = false;
  std::vector<int> node_, element_, local_;
  std::vector<double> weight_;
  // Per point, derivatives of e(n_s, g_s) with g_s = (D n_s)_q: ns x ns blocks, row-major.
  std::vector<double> enn_, eng_, egg_;
};

}  // namespace stillpoint

namespace stillpoint {

/// Derivatives with respect to parameter p of term `term` at fixed density: d E_xc / d theta
/// and d v_xc / d theta per spin (the exact mixed second derivative of the discrete energy).
struct XcParameterDerivative {
  double energy = 0.0;
  std::vector<Eigen::VectorXd> potential;
};
XcParameterDerivative xc_parameter_derivative(const Mesh& mesh, const XcFunctional& xc, std::size_t term, int p,
                                              const std::vector<Eigen::VectorXd>& density, double density_threshold);

}  // namespace stillpoint

namespace stillpoint {

/// Stability of the Kohn–Sham energy against short-wavelength density ripples. For a ripple of
/// wavenumber q along the gradient, the exchange-correlation energy changes at order q^2 by
/// (1/2) e_gg q^2 dn^2 (e_gg = d^2 e / d(n')^2 = 2 e_sigma + 4 sigma e_sigma_sigma), while the
/// non-interacting kinetic energy rises by at most the von Weizsaecker amount (1/2) q^2 dn^2 /
/// (4 n) (the large-q limit of the Lindhard response; Hartree is O(q^-2)). Where
/// 4 n e_gg < -1 (spin resolved: the smallest eigenvalue of 4 sqrt(n_s n_t) e_{g_s g_t}) ripples
/// lower the energy without bound as q grows, so the continuum problem has no minimum and a
/// discrete SCF chases ripples at the scale of the mesh.
struct RippleStability {
  double worst = 0.0;      ///< smallest value over the quadrature points (dimensionless; < -1 is unstable)
  double x = 0.0;          ///< where it occurs (bohr)
  double density = 0.0;    ///< total density there (bohr^-3, bohr^-1 on a line)
  double gradient = 0.0;   ///< |n'| there
  int unstable_points = 0; ///< quadrature points below -1
  double from = 0.0, to = 0.0;  ///< the range of x (bohr) of those points
};
/// Zero-initialised (`worst` = 0) for LDA-only functionals, which have no gradient term.
RippleStability ripple_stability(const Mesh& mesh, const XcFunctional& xc, const std::vector<Eigen::VectorXd>& density,
                                 double density_threshold);

}  // namespace stillpoint
