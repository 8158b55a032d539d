#pragma once
// Internal: the interpolants the table readers share (potential tables, reference and target
// densities), so that one spline is tested and used everywhere.
#include <algorithm>
#include <cmath>
#include <cstddef>
#include <vector>

namespace stillpoint::detail {

// Monotone cubic Hermite interpolation (Fritsch–Carlson slopes): no overshoot, so a
// non-negative table stays non-negative.
class MonotoneCubic {
 public:
  MonotoneCubic(std::vector<double> x, std::vector<double> y) : x_(std::move(x)), y_(std::move(y)) {
    const std::size_t n = x_.size();
    d_.assign(n, 0.0);
    std::vector<double> s(n - 1);
    for (std::size_t i = 0; i + 1 < n; ++i) s[i] = (y_[i + 1] - y_[i]) / (x_[i + 1] - x_[i]);
    if (n == 2) {
      d_[0] = d_[1] = s[0];
      return;
    }
    d_[0] = s[0];
    d_[n - 1] = s[n - 2];
    for (std::size_t i = 1; i + 1 < n; ++i) {
      if (s[i - 1] * s[i] <= 0.0) {
        d_[i] = 0.0;
      } else {
        // Weighted harmonic mean (Fritsch–Butland / PCHIP form).
        const double h0 = x_[i] - x_[i - 1], h1 = x_[i + 1] - x_[i];
        const double w1 = 2 * h1 + h0, w2 = h1 + 2 * h0;
        d_[i] = (w1 + w2) / (w1 / s[i - 1] + w2 / s[i]);
      }
    }
    for (std::size_t i = 0; i + 1 < n; ++i) {
      if (s[i] == 0.0) {
        d_[i] = d_[i + 1] = 0.0;
        continue;
      }
      const double a = d_[i] / s[i], b = d_[i + 1] / s[i];
      if (a < 0) d_[i] = 0.0;
      if (b < 0) d_[i + 1] = 0.0;
      const double r = a * a + b * b;
      if (r > 9.0) {
        const double t = 3.0 / std::sqrt(r);
        d_[i] = t * a * s[i];
        d_[i + 1] = t * b * s[i];
      }
    }
  }
  double operator()(double x) const {
    const auto it = std::upper_bound(x_.begin(), x_.end(), x);
    std::size_t i = it == x_.begin() ? 0 : static_cast<std::size_t>(it - x_.begin()) - 1;
    i = std::min(i, x_.size() - 2);
    const double h = x_[i + 1] - x_[i], t = (x - x_[i]) / h;
    const double t2 = t * t, t3 = t2 * t;
    return (2 * t3 - 3 * t2 + 1) * y_[i] + (t3 - 2 * t2 + t) * h * d_[i] + (-2 * t3 + 3 * t2) * y_[i + 1] +
           (t3 - t2) * h * d_[i + 1];
  }

 private:
  std::vector<double> x_, y_, d_;
};

// Natural cubic spline through (x, y), x strictly ascending, at least two points (two points:
// the straight line). The inversion uses it on log n, where densities are smooth and
// exponential tails are straight lines; potential tables use its second derivatives.
class NaturalSpline {
 public:
  NaturalSpline(std::vector<double> x, std::vector<double> y) : x_(std::move(x)), y_(std::move(y)) {
    const std::size_t n = x_.size();
    m_.assign(n, 0.0);
    if (n < 3) return;
    std::vector<double> c(n, 0.0), d(n, 0.0);
    for (std::size_t i = 1; i + 1 < n; ++i) {
      const double h0 = x_[i] - x_[i - 1], h1 = x_[i + 1] - x_[i];
      const double a = h0 / 6, b = (h0 + h1) / 3, cc = h1 / 6;
      const double r = (y_[i + 1] - y_[i]) / h1 - (y_[i] - y_[i - 1]) / h0;
      const double den = b - a * c[i - 1];
      c[i] = cc / den;
      d[i] = (r - a * d[i - 1]) / den;
    }
    for (std::size_t i = n - 2; i >= 1; --i) {
      m_[i] = d[i] - c[i] * m_[i + 1];
      if (i == 1) break;
    }
  }
  /// Second derivatives at the points (zero at both ends).
  const std::vector<double>& second_derivatives() const { return m_; }
  double operator()(double x) const {
    const auto it = std::upper_bound(x_.begin(), x_.end(), x);
    std::size_t i = it == x_.begin() ? 0 : static_cast<std::size_t>(it - x_.begin()) - 1;
    i = std::min(i, x_.size() - 2);
    const double h = x_[i + 1] - x_[i], a = (x_[i + 1] - x) / h, b = (x - x_[i]) / h;
    return a * y_[i] + b * y_[i + 1] + ((a * a * a - a) * m_[i] + (b * b * b - b) * m_[i + 1]) * h * h / 6.0;
  }

 private:
  std::vector<double> x_, y_, m_;
};

}  // namespace stillpoint::detail
