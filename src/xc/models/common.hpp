#pragma once
// Shared pieces of the built-in model families.
#include <cmath>
#include <numbers>

#include "stillpoint/numerics/jet.hpp"

namespace stillpoint::models {

/// Dirac exchange energy per volume of an unpolarized gas: -(3/4)(3/pi)^(1/3) n^(4/3).
inline Jet dirac_exchange(const Jet& n) {
  static const double c = -0.75 * std::cbrt(3.0 / std::numbers::pi);
  return c * pow(n, 4.0 / 3.0);
}

/// s^2 = sigma / (4 (3 pi^2)^(2/3) n^(8/3)) for an unpolarized density n with |grad n|^2 = sigma.
inline Jet reduced_gradient_squared(const Jet& n, const Jet& sigma) {
  static const double c = 1.0 / (4.0 * std::pow(3.0 * std::numbers::pi * std::numbers::pi, 2.0 / 3.0));
  return c * sigma / pow(n, 8.0 / 3.0);
}

/// Exchange by spin scaling: E[n_u, n_d] = (E0[2 n_u, 4 s_uu] + E0[2 n_d, 4 s_dd]) / 2.
template <class F>
Jet spin_scaled(const Jet& nu, const Jet& nd, const Jet& suu, const Jet& sdd, F&& e0) {
  Jet e = nu.constant(0.0);
  if (nu.value() > 0.0) e = e + 0.5 * e0(2.0 * nu, 4.0 * suu);
  if (nd.value() > 0.0) e = e + 0.5 * e0(2.0 * nd, 4.0 * sdd);
  return e;
}

}  // namespace stillpoint::models
