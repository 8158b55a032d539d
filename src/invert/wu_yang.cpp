// Wu–Yang inversion step (methods.hpp).
#include "invert/methods.hpp"

#include <Eigen/Cholesky>

namespace stillpoint::inversion_detail {

namespace {

// Solves S x = b for symmetric positive definite S (Jacobi-equilibrated Cholesky, LDLT fallback).
Eigen::VectorXd spd_solve(const Eigen::MatrixXd& S, const Eigen::VectorXd& b) {
  const Eigen::VectorXd d = S.diagonal().cwiseAbs().cwiseMax(1e-300).cwiseSqrt().cwiseInverse();
  const Eigen::MatrixXd Ss = d.asDiagonal() * S * d.asDiagonal();
  Eigen::LLT<Eigen::MatrixXd> llt(Ss);
  Eigen::VectorXd y;
  if (llt.info() == Eigen::Success) {
    y = llt.solve(d.cwiseProduct(b));
  } else {
    Eigen::LDLT<Eigen::MatrixXd> ldlt(Ss);
    y = ldlt.solve(d.cwiseProduct(b));
  }
  return d.cwiseProduct(y);
}

}  // namespace

void wu_yang_step(const Eigen::MatrixXd& A, const Eigen::VectorXd& r, const Eigen::VectorXd& W, const Eigen::MatrixXd& K,
                  const Eigen::VectorXd& delta, double alpha, Eigen::VectorXd& d, Eigen::VectorXd& g) {
  const int N = static_cast<int>(K.rows()), nu = static_cast<int>(A.rows());
  g = alpha * (K * delta);
  Eigen::MatrixXd S = alpha * K;
  g.segment(1, nu) -= W.segment(1, nu).cwiseProduct(r);
  S.block(1, 1, nu, nu) -= A;
  const double gamma = S.diagonal().cwiseAbs().mean() / N;
  S.array() += gamma;
  d = spd_solve(S, -g);
}

double wu_yang_objective(double band, const Eigen::VectorXd& W, const std::vector<Eigen::VectorXd>& v,
                         const std::vector<Eigen::VectorXd>& target) {
  double J = -band;
  for (std::size_t s = 0; s < v.size(); ++s) J += W.dot(v[s].cwiseProduct(target[s]));
  return J;
}

}  // namespace stillpoint::inversion_detail
