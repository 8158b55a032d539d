#pragma once
// Second-order forward-mode automatic differentiation with a runtime number of variables.
//
// A Jet carries a value, its gradient and (when order == 2) its Hessian with respect to up to
// kMaxVars independent variables, propagated by exact truncated Taylor arithmetic. One
// evaluation of a model energy density with jets in (densities, gradients, parameters) gives
// the potential, the kernel and every mixed parameter derivative exactly: no finite
// differences anywhere. Storage is inline (no heap), so jets are cheap to copy.
#include <array>
#include <cmath>
#include <cstdint>

namespace stillpoint {

class Jet {
 public:
  static constexpr int kMaxVars = 8;  // 5 density inputs + parameters differentiated one at a time
  static constexpr int kMaxHess = kMaxVars * (kMaxVars + 1) / 2;

  Jet() = default;
  /// A constant in a space of n variables.
  Jet(double value, int n, int order) : v_(value), n_(static_cast<std::int8_t>(n)), order_(static_cast<std::int8_t>(order)) { clear(); }
  /// Variable number i (0-based) of n, with value `value`.
  static Jet variable(double value, int i, int n, int order) {
    Jet j(value, n, order);
    j.g_[i] = 1.0;
    return j;
  }

  double value() const { return v_; }
  double d(int i) const { return g_[i]; }
  /// Second derivative with respect to variables i and j (order 2 only).
  double d2(int i, int j) const { return i <= j ? h_[idx(i, j)] : h_[idx(j, i)]; }
  int size() const { return n_; }
  int order() const { return order_; }
  Jet constant(double c) const { return Jet(c, n_, order_); }

  friend Jet operator+(const Jet& a, const Jet& b) {
    Jet r = a;
    r.v_ += b.v_;
    for (int i = 0; i < a.n_; ++i) r.g_[i] += b.g_[i];
    if (a.order_ > 1)
      for (int k = 0; k < a.hsize(); ++k) r.h_[k] += b.h_[k];
    return r;
  }
  friend Jet operator-(const Jet& a, const Jet& b) {
    Jet r = a;
    r.v_ -= b.v_;
    for (int i = 0; i < a.n_; ++i) r.g_[i] -= b.g_[i];
    if (a.order_ > 1)
      for (int k = 0; k < a.hsize(); ++k) r.h_[k] -= b.h_[k];
    return r;
  }
  friend Jet operator-(const Jet& a) { return a.scaled(-1.0); }
  friend Jet operator*(const Jet& a, const Jet& b) {
    Jet r(a.v_ * b.v_, a.n_, a.order_);
    for (int i = 0; i < a.n_; ++i) r.g_[i] = a.v_ * b.g_[i] + b.v_ * a.g_[i];
    if (a.order_ > 1) {
      int k = 0;
      for (int i = 0; i < a.n_; ++i)
        for (int j = i; j < a.n_; ++j, ++k)
          r.h_[k] = a.v_ * b.h_[k] + b.v_ * a.h_[k] + a.g_[i] * b.g_[j] + a.g_[j] * b.g_[i];
    }
    return r;
  }
  friend Jet operator/(const Jet& a, const Jet& b) { return a * b.reciprocal(); }
  friend Jet operator+(const Jet& a, double c) { Jet r = a; r.v_ += c; return r; }
  friend Jet operator+(double c, const Jet& a) { return a + c; }
  friend Jet operator-(const Jet& a, double c) { return a + (-c); }
  friend Jet operator-(double c, const Jet& a) { return (-a) + c; }
  friend Jet operator*(const Jet& a, double c) { return a.scaled(c); }
  friend Jet operator*(double c, const Jet& a) { return a.scaled(c); }
  friend Jet operator/(const Jet& a, double c) { return a.scaled(1.0 / c); }
  friend Jet operator/(double c, const Jet& a) { return a.reciprocal().scaled(c); }
  Jet& operator+=(const Jet& b) { return *this = *this + b; }
  Jet& operator-=(const Jet& b) { return *this = *this - b; }
  Jet& operator*=(const Jet& b) { return *this = *this * b; }

  /// f(this) given f, f', f'' at the value: the chain rule to second order.
  Jet apply(double f, double df, double d2f) const {
    Jet r(f, n_, order_);
    for (int i = 0; i < n_; ++i) r.g_[i] = df * g_[i];
    if (order_ > 1) {
      int k = 0;
      for (int i = 0; i < n_; ++i)
        for (int j = i; j < n_; ++j, ++k) r.h_[k] = df * h_[k] + d2f * g_[i] * g_[j];
    }
    return r;
  }
  Jet reciprocal() const { return apply(1.0 / v_, -1.0 / (v_ * v_), 2.0 / (v_ * v_ * v_)); }

 private:
  void clear() {
    for (int i = 0; i < n_; ++i) g_[i] = 0.0;
    if (order_ > 1)
      for (int k = 0; k < hsize(); ++k) h_[k] = 0.0;
  }
  int hsize() const { return n_ * (n_ + 1) / 2; }
  int idx(int i, int j) const { return i * n_ - i * (i - 1) / 2 + (j - i); }
  Jet scaled(double c) const {
    Jet r = *this;
    r.v_ *= c;
    for (int i = 0; i < n_; ++i) r.g_[i] *= c;
    if (order_ > 1)
      for (int k = 0; k < hsize(); ++k) r.h_[k] *= c;
    return r;
  }

  double v_ = 0.0;
  std::int8_t n_ = 0, order_ = 1;
  // Entries beyond the active size are never read, so they are left uninitialized.
  std::array<double, kMaxVars> g_;
  std::array<double, kMaxHess> h_;
};

inline Jet exp(const Jet& a) { const double e = std::exp(a.value()); return a.apply(e, e, e); }
inline Jet log(const Jet& a) { const double x = a.value(); return a.apply(std::log(x), 1.0 / x, -1.0 / (x * x)); }
inline Jet sqrt(const Jet& a) { const double s = std::sqrt(a.value()); return a.apply(s, 0.5 / s, -0.25 / (s * a.value())); }
inline Jet pow(const Jet& a, double p) {
  const double x = a.value();
  if (x == 0.0) return a.apply(0.0, p == 1.0 ? 1.0 : 0.0, 0.0);
  const double f = std::pow(x, p);
  return a.apply(f, p * f / x, p * (p - 1.0) * f / (x * x));
}
inline Jet pow(const Jet& a, const Jet& b) { return exp(b * log(a)); }
inline Jet sin(const Jet& a) { const double x = a.value(); return a.apply(std::sin(x), std::cos(x), -std::sin(x)); }
inline Jet cos(const Jet& a) { const double x = a.value(); return a.apply(std::cos(x), -std::sin(x), -std::cos(x)); }
inline Jet tanh(const Jet& a) { const double t = std::tanh(a.value()); return a.apply(t, 1 - t * t, -2 * t * (1 - t * t)); }
inline Jet atan(const Jet& a) { const double x = a.value(), d = 1.0 / (1.0 + x * x); return a.apply(std::atan(x), d, -2.0 * x * d * d); }
inline Jet asinh(const Jet& a) {
  const double x = a.value(), s = std::sqrt(1.0 + x * x);
  return a.apply(std::asinh(x), 1.0 / s, -x / (s * s * s));
}
inline Jet cbrt(const Jet& a) { return pow(a, 1.0 / 3.0); }

}  // namespace stillpoint
