// The seam between Eigen (everything else) and Armadillo (dense LAPACK eigensolver).
#include <armadillo>

#include "stillpoint/numerics/eigensolver.hpp"
#include "stillpoint/common/errors.hpp"

namespace stillpoint {

Eigenpairs dense_lowest_eigenpairs(const Eigen::MatrixXd& H, int count) {
  const arma::uword n = static_cast<arma::uword>(H.rows());
  arma::mat A(const_cast<double*>(H.data()), n, n, /*copy_aux_mem=*/true, /*strict=*/false);
  arma::vec vals;
  arma::mat vecs;
  if (!arma::eig_sym(vals, vecs, A, "dc")) throw NumericalError("dense symmetric eigensolver (LAPACK dsyevd) failed");
  const int m = std::min<int>(count, static_cast<int>(n));
  Eigenpairs out;
  out.values.resize(m);
  out.vectors.resize(static_cast<Eigen::Index>(n), m);
  for (int j = 0; j < m; ++j) {
    out.values(j) = vals(j);
    for (arma::uword i = 0; i < n; ++i) out.vectors(static_cast<Eigen::Index>(i), j) = vecs(i, j);
  }
  return out;
}

}  // namespace stillpoint
