#pragma once
// Exchange of the 1D uniform electron gas with the soft-Coulomb interaction
// v(u) = 1/sqrt(u² + a²), a = softening length (bohr), in Hartree atomic units.
//
// For an unpolarized density n (electrons per bohr) and R = π a n the energy per volume is
//
//     e(n) = n ε_x(n) = −F(R) / (π a)²,    F(R) = R I(R) − 1 + R K1(R),   I(R) = ∫_0^R K0(t) dt,
//
// i.e. ε_x = −f(R)/(π a) with f = F/R, and exactly de/dn = −I(R)/(π a), d²e/dn² = −K0(R).
// F does not depend on a, so one process-wide table of F serves every softening. F is
// interpolated between log-spaced nodes by quintic Hermite polynomials that match F, F' and F''
// at both ends, and the returned derivatives are those of the interpolant itself: e, de/dn and
// d²e/dn² are exact derivatives of one C² function of n (to rounding), which is what gradient
// checks of a discretized energy need. Below the table a small-R series is used, above it the
// asymptote F = πR/2 − 1 (what it drops is below e^-200); both join the table C².
//
// Accuracy against a direct long double evaluation (measured, see the tests), relative, at every
// R: F 7e-16, de/dn 7e-14, d²e/dn² 8e-11 (also where K0(R) is exponentially small).
//
// Spin: exchange obeys exact spin scaling, e(n↑, n↓) = ½ e(2n↑) + ½ e(2n↓).
//
// The first call builds the table (about 10 ms, thread-safe); after that a point costs 25–35 ns.
#include <cstddef>

namespace stillpoint {

/// Per-volume exchange energy density e = n ε_x and its first two derivatives with respect to n,
/// unpolarized. Units: e in Ha/bohr, de_dn in Ha, d2e_dn2 in Ha·bohr.
struct SoftExchange1dValue {
  double e = 0.0;
  double de_dn = 0.0;
  double d2e_dn2 = 0.0;
};

/// Unpolarized soft-Coulomb exchange at density n (bohr⁻¹) for softening a > 0 (bohr).
/// n <= 0 returns zeros (the limit of e and de/dn; d²e/dn² diverges like ln n there).
/// NaN n gives NaN. Throws std::invalid_argument unless softening is finite and > 0.
SoftExchange1dValue soft_exchange_1d_unpolarized(double n, double softening);

/// Spin-polarized energy per volume e(n↑, n↓) and derivatives:
/// de = (∂e/∂n↑, ∂e/∂n↓), d2e = (∂²e/∂n↑², ∂²e/∂n↑∂n↓ (always 0), ∂²e/∂n↓²).
struct SoftExchange1dSpinValue {
  double e = 0.0;
  double de[2] = {0.0, 0.0};
  double d2e[3] = {0.0, 0.0, 0.0};
};

/// Spin-polarized soft-Coulomb exchange via spin scaling; a spin channel with n_σ <= 0 contributes
/// zeros (so n↓ = 0 gives ∂e/∂n↓ = 0 and ∂²e/∂n↓² = 0 rather than the −∞ limit).
/// Throws std::invalid_argument unless softening is finite and > 0.
SoftExchange1dSpinValue soft_exchange_1d_polarized(double n_up, double n_down, double softening);

/// Batch form of soft_exchange_1d_unpolarized over np points: e[i], de[i], d2e[i] for n[i].
/// Any of the output pointers may be null to skip that quantity.
void soft_exchange_1d_unpolarized(std::size_t np, const double* n, double softening, double* e,
                                  double* de, double* d2e);

namespace detail {

/// The a-independent shape function and its derivatives: F(R), F'(R) = I(R), F''(R) = K0(R).
struct SoftExchange1dShape {
  double F = 0.0;
  double dF = 0.0;
  double d2F = 0.0;
};

/// Table layout, exposed so tests can probe nodes and switch points: kIntervals log-spaced
/// intervals over [RMin, RMax]; above RSplit the table holds H = e^R (F − πR/2 + 1) instead of F.
inline constexpr double kSoftExchange1dTableRMin = 1e-3;
inline constexpr double kSoftExchange1dTableRMax = 200.0;
inline constexpr double kSoftExchange1dTableRSplit = 0.5;
inline constexpr int kSoftExchange1dTableIntervals = 1000;

/// The evaluation used by the public functions (series / table / asymptote); zeros for R <= 0.
SoftExchange1dShape soft_exchange_1d_shape(double R);

/// True when the table compiled into the library equals the one this machine builds now,
/// bit for bit (always true when the library builds it at run time).
bool soft_exchange_1d_table_is_current();

/// Slow direct evaluation (long double series, quadrature and Bessel functions), independent of
/// the table's accumulation path; for validation only. R > 0.
SoftExchange1dShape soft_exchange_1d_shape_reference(double R);

}  // namespace detail
}  // namespace stillpoint
