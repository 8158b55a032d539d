// Direct-minimization inversion step (methods.hpp).
#include "invert/methods.hpp"

#include <algorithm>
#include <cmath>

namespace stillpoint::inversion_detail {

int direct_step(const Eigen::MatrixXd& A, const Eigen::VectorXd& r, const Eigen::VectorXd& W, const Eigen::MatrixXd& K,
                const Eigen::VectorXd& delta, double alpha, double J, int max_krylov, Eigen::VectorXd& d,
                Eigen::VectorXd& g) {
  const int N = static_cast<int>(K.rows()), nu = static_cast<int>(A.rows());
  g = alpha * (K * delta);
  g.segment(1, nu) += A * r;
  const double gamma = (alpha * K).diagonal().cwiseAbs().mean() / N;
  const Eigen::VectorXd Wi = W.segment(1, nu).cwiseInverse();
  auto apply = [&](const Eigen::VectorXd& x) {
    Eigen::VectorXd y = alpha * (K * x);
    y.segment(1, nu) += A * Wi.cwiseProduct(A * x.segment(1, nu));
    y.array() += gamma * x.sum();
    return y;
  };
  Eigen::VectorXd diag = alpha * K.diagonal();
  diag.segment(1, nu) += (A.cwiseAbs2() * Wi);
  diag.array() += gamma;
  diag = diag.cwiseMax(1e-300).cwiseInverse();
  d = Eigen::VectorXd::Zero(N);
  Eigen::VectorXd res = -g, z = diag.cwiseProduct(res), p = z;
  double rz = res.dot(z);
  const double bnorm = g.norm();
  const double forcing = std::min(1e-2, std::sqrt(g.norm() / std::max(1e-300, std::abs(J) + 1.0)));
  int krylov = 0;
  for (int it = 0; it < max_krylov; ++it) {
    const Eigen::VectorXd Ap = apply(p);
    const double pAp = p.dot(Ap);
    if (!(pAp > 0)) break;
    const double a = rz / pAp;
    d += a * p;
    res -= a * Ap;
    ++krylov;
    if (res.norm() <= forcing * bnorm) break;
    z = diag.cwiseProduct(res);
    const double rz2 = res.dot(z);
    p = z + (rz2 / rz) * p;
    rz = rz2;
  }
  return krylov;
}

double direct_objective(const Eigen::VectorXd& W, const std::vector<Eigen::VectorXd>& density,
                        const std::vector<Eigen::VectorXd>& target) {
  double J = 0.0;
  for (std::size_t s = 0; s < density.size(); ++s) J += 0.5 * W.dot((density[s] - target[s]).cwiseAbs2());
  return J;
}

}  // namespace stillpoint::inversion_detail
