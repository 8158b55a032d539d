#pragma once
// Hartree potential and energy of a nodal density, as one symmetric quadratic form
// E_H = (1/2) n^T A n so that v_H = (1/W) dE_H/dn exactly.
//
// Radial: the radial Poisson equation -U'' = 4 pi r n for U = r v_H, solved in the same
//   spectral-element space (U(0) = 0, U(R) = N), so v_H = U / r.
// Line: the soft-Coulomb convolution v_H(x) = sum_j W_j n_j / sqrt((x - x_j)^2 + a^2). On the
//   uniform element mesh the kernel matrix is block Toeplitz (blocks depend only on the element
//   offset), so it is applied by FFT in O(N log N) instead of O(N^2).
#include <Eigen/Dense>
#include <memory>

#include "stillpoint/numerics/mesh.hpp"

namespace stillpoint {

class Hartree {
 public:
  /// `softening` is used on the line only (must be > 0 there).
  Hartree(const Mesh& mesh, double softening);
  ~Hartree();
  Hartree(Hartree&&) noexcept;
  Hartree& operator=(Hartree&&) noexcept;

  /// v_H at every node, in hartree, for the total density n.
  Eigen::VectorXd potential(const Eigen::VectorXd& n) const;
  /// (1/2) sum_k W_k n_k v_H,k.
  double energy(const Eigen::VectorXd& n, const Eigen::VectorXd& v) const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace stillpoint
