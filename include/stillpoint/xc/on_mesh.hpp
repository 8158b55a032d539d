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
