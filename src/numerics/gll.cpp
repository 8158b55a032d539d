#include "stillpoint/numerics/gll.hpp"

#include <cmath>
#include <numbers>
#include <stdexcept>

namespace stillpoint {

namespace {
// Legendre P_p and its derivative by the three-term recurrence.
void legendre(int p, double x, double& P, double& dP) {
  double p0 = 1.0, p1 = x;
  if (p == 0) {
    P = 1.0;
    dP = 0.0;
    return;
  }
  for (int k = 2; k <= p; ++k) {
    const double pk = ((2.0 * k - 1.0) * x * p1 - (k - 1.0) * p0) / k;
    p0 = p1;
    p1 = pk;
  }
  P = p1;
  dP = p * (x * p1 - p0) / (x * x - 1.0);
}
}  // namespace

GllRule gll_rule(int p) {
  if (p < 1 || p > 64) throw std::invalid_argument("GLL degree must be between 1 and 64");
  GllRule r;
  r.degree = p;
  r.nodes.resize(p + 1);
  r.weights.resize(p + 1);
  r.nodes(0) = -1.0;
  r.nodes(p) = 1.0;
  // Interior nodes are the roots of P_p'. Newton on q(x) = P_p'(x) using the Legendre ODE
  // (1-x^2) P'' = 2x P' - p(p+1) P, started from Chebyshev–Lobatto points.
  for (int i = 1; i < p; ++i) {
    double x = -std::cos(std::numbers::pi * i / p);
    for (int it = 0; it < 100; ++it) {
      double P, dP;
      legendre(p, x, P, dP);
      const double d2P = (2.0 * x * dP - p * (p + 1.0) * P) / (1.0 - x * x);
      const double dx = dP / d2P;
      x -= dx;
      if (std::abs(dx) < 1e-16) break;
    }
    r.nodes(i) = x;
  }
  Eigen::VectorXd Pn(p + 1);
  for (int i = 0; i <= p; ++i) {
    double P, dP;
    const double x = r.nodes(i);
    if (i == 0 || i == p) {
      P = (i == 0 && p % 2 == 1) ? -1.0 : 1.0;
    } else {
      legendre(p, x, P, dP);
    }
    Pn(i) = P;
    r.weights(i) = 2.0 / (p * (p + 1.0) * P * P);
  }
  r.derivative.setZero(p + 1, p + 1);
  for (int i = 0; i <= p; ++i)
    for (int j = 0; j <= p; ++j)
      if (i != j) r.derivative(i, j) = Pn(i) / (Pn(j) * (r.nodes(i) - r.nodes(j)));
  r.derivative(0, 0) = -p * (p + 1.0) / 4.0;
  r.derivative(p, p) = p * (p + 1.0) / 4.0;
  return r;
}

Eigen::MatrixXd lagrange_derivative_matrix(const Eigen::VectorXd& s, const Eigen::VectorXd& x) {
  const int m = static_cast<int>(s.size());
  Eigen::VectorXd lambda(m);  // barycentric weights
  for (int j = 0; j < m; ++j) {
    double prod = 1.0;
    for (int k = 0; k < m; ++k)
      if (k != j) prod *= (s(j) - s(k));
    lambda(j) = 1.0 / prod;
  }
  Eigen::MatrixXd D = Eigen::MatrixXd::Zero(x.size(), m);
  for (int i = 0; i < x.size(); ++i) {
    int hit = -1;
    for (int k = 0; k < m; ++k)
      if (x(i) == s(k)) hit = k;
    if (hit >= 0) {
      double diag = 0.0;
      for (int j = 0; j < m; ++j) {
        if (j == hit) continue;
        D(i, j) = (lambda(j) / lambda(hit)) / (s(hit) - s(j));
        diag -= D(i, j);
      }
      D(i, hit) = diag;
    } else {
      for (int j = 0; j < m; ++j) {
        double lj = 1.0, sum = 0.0;
        for (int k = 0; k < m; ++k) {
          if (k == j) continue;
          lj *= (x(i) - s(k)) / (s(j) - s(k));
          sum += 1.0 / (x(i) - s(k));
        }
        D(i, j) = lj * sum;
      }
    }
  }
  return D;
}

}  // namespace stillpoint
