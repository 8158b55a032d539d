#pragma once
// Banded LU with partial pivoting, in LAPACK's dgbtrf storage and with its pivoting rule, for
// the narrow bands of spectral-element operators (half-bandwidth = element degree). LAPACK's
// unblocked dgbtf2 issues one BLAS call per column and row operation; at bandwidth 8 the call
// overhead is most of the cost (measured: 37 % of a neon SCF in dger/daxpy). These loops do
// the same arithmetic in the same order; tests/band_lu_test.cpp compares them with LAPACK.
#include <vector>

namespace stillpoint {

struct BandLuFactor {
  int n = 0, kl = 0, ku = 0;
  /// Band storage, column-major, leading dimension 2 kl + ku + 1: A(i, j) at
  /// ab[(kl + ku + i - j) + j * ld]; the top kl rows hold the fill-in of the pivoting.
  std::vector<double> ab;
  std::vector<int> ipiv;  ///< 0-based row interchanged with row j at step j
  int ld() const { return 2 * kl + ku + 1; }
  double& at(int i, int j) { return ab[static_cast<std::size_t>(kl + ku + i - j) + static_cast<std::size_t>(j) * ld()]; }

  /// Sizes the storage for an n x n matrix and zeroes it; fill with at(i, j), then factor().
  void reset(int n, int kl, int ku);
  /// Factorizes in place. Returns 0, or j + 1 when the pivot of column j is exactly zero (the
  /// factorization is completed anyway, as LAPACK does; solves then give a huge vector, which
  /// is what inverse iteration at an exact eigenvalue wants).
  int factor();
  /// Solves A x = b in place.
  void solve(double* b) const;
};

/// Number of eigenvalues of the symmetric band matrix A below x, by Sylvester's law of inertia
/// on A - x = L D L^T (no pivoting; a pivot that vanishes exactly is moved off zero, which
/// counts an eigenvalue at x as above it). `lower` holds the lower band column-major,
/// lower[(i - j) + j * (kd + 1)] = A(i, j) for 0 <= i - j <= kd. O(n kd^2).
int band_count_below(const std::vector<double>& lower, int n, int kd, double x);

/// Solves A x = b in place from LAPACK dpbtrf's upper factor U (A = U^T U), stored as
/// ab[(kd + i - j) + j * (kd + 1)] for the band of U: the same as dpbtrs, without its
/// per-column BLAS calls (OpenBLAS's tbsv issues one axpy per column).
void band_cholesky_solve(const double* ab, int n, int kd, double* b);

}  // namespace stillpoint
