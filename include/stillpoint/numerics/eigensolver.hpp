#pragma once
// Lowest eigenpairs of the symmetric banded Kohn–Sham matrices.
//
// The matrices are H = T + diag(d), with T the (scaled) kinetic part whose sparsity never
// changes during an SCF. Sparse path, cold: bisection on Sylvester inertia (band LDL^T counts)
// brackets each wanted eigenvalue, shifted inverse iteration refines it; shift-invert Lanczos
// (Spectra) below the spectrum is the fallback. Warm (SCF): inverse iteration from the previous
// pairs; when a level crossed or a new one came in from below (early SCF iterations), the
// bisection starts from the pairs the warm refinement did find. Every result is proved
// complete by inertia: H - low positive definite and exactly `count` eigenvalues below just
// above the highest. Dense path (small grids): LAPACK through
// Armadillo, the only place the library uses Armadillo.
#include <Eigen/Dense>
#include <Eigen/Sparse>
#include <limits>
#include <memory>

namespace stillpoint {

struct EigensolverOptions {
  /// Use dense diagonalization when the matrix has at most this many rows.
  int dense_below = 160;
  /// Relative convergence tolerance of the Lanczos iteration (Spectra's tol).
  double tolerance = 1e-13;
  /// Maximum number of Lanczos restarts.
  int max_restarts = 2000;
};

struct Eigenpairs {
  Eigen::VectorXd values;   ///< ascending
  Eigen::MatrixXd vectors;  ///< columns, orthonormal in the Euclidean inner product
};

/// Dense symmetric eigenpairs (all or the lowest `count`) by LAPACK via Armadillo.
Eigenpairs dense_lowest_eigenpairs(const Eigen::MatrixXd& H, int count);

/// Number of eigenvalues of the sparse symmetric matrix A below zero (Sylvester inertia of LDL^T).
int count_negative_eigenvalues(const Eigen::SparseMatrix<double>& A);

/// What one solve leaves for the next: a proven lower bound of the spectrum and the previous
/// eigenpairs, which let the next solve in an SCF refine states by a few inverse iterations
/// instead of a full Lanczos run.
struct EigenWarmStart {
  double lower_bound = std::numeric_limits<double>::quiet_NaN();
  Eigenpairs previous;
};

class LowestEigensolver {
 public:
  /// T must be symmetric positive semi-definite (both triangles stored).
  LowestEigensolver(Eigen::SparseMatrix<double> T, EigensolverOptions options = {});
  ~LowestEigensolver();
  LowestEigensolver(LowestEigensolver&&) noexcept;
  LowestEigensolver& operator=(LowestEigensolver&&) noexcept;

  /// Lowest `count` eigenpairs of T + diag(diagonal). `warm.lower_bound` is a guess for a
  /// number just below the lowest eigenvalue (NaN if unknown); a provable bound is used when
  /// the guess turns out to be above the spectrum. `warm` is updated for the next call.
  /// Whatever path is taken, the result is verified by Sylvester inertia: nothing lies below
  /// the lowest value and exactly `count` eigenvalues lie at or below the highest.
  /// Throws NumericalError on failure.
  Eigenpairs solve(const Eigen::VectorXd& diagonal, int count, EigenWarmStart& warm) const;

  int size() const;

 private:
  struct Impl;
  std::unique_ptr<Impl> impl_;
};

}  // namespace stillpoint
