#include "stillpoint/xc/soft_exchange_1d.hpp"

#include <array>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <limits>
#include <numbers>
#include <sstream>
#include <stdexcept>
#include <vector>

namespace stillpoint {
namespace {

using detail::SoftExchange1dShape;
constexpr double kRMin = detail::kSoftExchange1dTableRMin;
constexpr double kRMax = detail::kSoftExchange1dTableRMax;
constexpr int kIntervals = detail::kSoftExchange1dTableIntervals;

// ---------------------------------------------------------------------------------------------
// Small-R series. With L = ln(R/2):
//   K0(t) = Σ c_k t^{2k} (H_k − γ − L),          c_k = 1 / (4^k (k!)²)
//   K1(t) = 1/t + Σ d_k t^{2k+1} (L + γ − (H_k + H_{k+1})/2),   d_k = 1 / (2^{2k+1} k! (k+1)!)
// and integrating K0 term by term gives F(R) = R (I + K1 − 1/R) = Σ R^{2k+2} (α_k + β_k L).
// The 1/R of K1 cancels analytically here, which is why the table starts from the series rather
// than from Bessel values, where it would cost six digits at R = 1e-3.

constexpr long double harmonic(int k) {
  long double h = 0.0L;
  for (int i = 1; i <= k; ++i) h += 1.0L / i;
  return h;
}

constexpr long double series_c(int k) {
  long double c = 1.0L;
  for (int i = 1; i <= k; ++i) c /= 4.0L * i * i;
  return c;
}

constexpr long double series_d(int k) {
  long double d = 0.5L;
  for (int i = 1; i <= k; ++i) d /= 4.0L * i * (i + 1);
  return d;
}

// Three terms: at R < 1e-3 the first omitted one (R^8 ln R) is 1e-18 of F.
constexpr int kSeriesTerms = 3;

struct SeriesCoefficients {
  std::array<long double, kSeriesTerms> alpha{}, beta{};
};

constexpr SeriesCoefficients make_series_coefficients() {
  constexpr long double g = std::numbers::egamma_v<long double>;
  SeriesCoefficients s;
  for (int k = 0; k < kSeriesTerms; ++k) {
    const long double m = 2 * k + 1;
    const long double c = series_c(k), d = series_d(k);
    s.alpha[k] =
        c * (harmonic(k) - g + 1.0L / m) / m + d * (g - (harmonic(k) + harmonic(k + 1)) / 2);
    s.beta[k] = d - c / m;
  }
  return s;
}

constexpr SeriesCoefficients kSeries = make_series_coefficients();

// The derivatives are those of the truncated sum itself, so the switch to the table (which is
// seeded with exactly these values) is C² to rounding.
template <class T>
SoftExchange1dShape series_shape(T R, T* out = nullptr) {
  using std::log;
  const T L = log(R / 2);
  const T R2 = R * R;
  T F = 0, dF = 0, d2F = 0;
  T p = 1;  // R^{2k}
  for (int k = 0; k < kSeriesTerms; ++k) {
    const T a = static_cast<T>(kSeries.alpha[k]), b = static_cast<T>(kSeries.beta[k]);
    const T q = a + b * L;
    const T m = 2 * k + 1;
    F += p * R2 * q;
    dF += p * R * ((m + 1) * q + b);
    d2F += p * ((m + 1) * m * q + (2 * m + 1) * b);
    p *= R2;
  }
  if (out != nullptr) {
    out[0] = F;
    out[1] = dF;
    out[2] = d2F;
  }
  return {static_cast<double>(F), static_cast<double>(dF), static_cast<double>(d2F)};
}

// ---------------------------------------------------------------------------------------------
// Gauss–Legendre rule on [−1, 1], by Newton on P_m in long double.
struct GaussRule {
  std::vector<long double> x, w;
};

GaussRule gauss_legendre(int m) {
  GaussRule r;
  r.x.resize(m);
  r.w.resize(m);
  const long double pi = std::numbers::pi_v<long double>;
  for (int i = 0; i < m; ++i) {
    long double z = std::cos(pi * (i + 0.75L) / (m + 0.5L));
    long double dp = 0;
    for (int it = 0; it < 100; ++it) {
      long double p0 = 1, p1 = z;
      for (int k = 2; k <= m; ++k) {
        const long double p2 = ((2 * k - 1) * z * p1 - (k - 1) * p0) / k;
        p0 = p1;
        p1 = p2;
      }
      dp = m * (z * p1 - p0) / (z * z - 1);
      const long double dz = p1 / dp;
      z -= dz;
      if (std::fabs(dz) < 1e-21L) break;
    }
    r.x[i] = z;
    r.w[i] = 2 / ((1 - z * z) * dp * dp);
  }
  return r;
}

long double bessel_k0(long double x) { return std::cyl_bessel_k(0.0L, x); }
long double bessel_k1(long double x) { return std::cyl_bessel_k(1.0L, x); }

// ---------------------------------------------------------------------------------------------
// Table. Interval j covers [r0, r0 + h]; with t = (R − r0)/h it holds a quintic p(t) = Σ c_i t^i.
// One interval fills one cache line.
//
// Two representations share the log-spaced grid. Below kRExp p interpolates F itself. Above it,
// F = πR/2 − 1 + e^{−R} H(R) and p interpolates H: F'' = K0 decays like e^{−R}, on a scale of 1,
// while the intervals grow to ΔR ≈ 3.5 at the end, so a polynomial in F would leave d²e/dn² there
// with little relative accuracy; H varies on the scale R, like F at small R. The split is where
// the F form starts to lose relative accuracy in F'' (measured ten times worse at R = 2).
constexpr double kRExp = detail::kSoftExchange1dTableRSplit;

struct alignas(64) Interval {
  double r0, inv_h;
  double c[6];
};

struct Table {
  double log_rmin = 0, inv_dlog = 0;
  int first_exp = 0;  // first interval in the e^{−R} H representation
  std::vector<Interval> intervals;
};

// v0, v1 = value, h·slope, h²·curvature at t = 0; A, B, C = what the quadratic Taylor polynomial
// about t = 0 misses at t = 1 in the same three quantities.
void set_quintic(Interval& iv, long double r0, long double h, long double v0, long double v1,
                 long double v2, long double A, long double B, long double C) {
  iv.r0 = static_cast<double>(r0);
  iv.inv_h = static_cast<double>(1 / h);
  iv.c[0] = static_cast<double>(v0);
  iv.c[1] = static_cast<double>(v1);
  iv.c[2] = static_cast<double>(v2 / 2);
  iv.c[3] = static_cast<double>(10 * A - 4 * B + C / 2);
  iv.c[4] = static_cast<double>(-15 * A + 7 * B - C);
  iv.c[5] = static_cast<double>(6 * A - 3 * B + C / 2);
}

Table build_table() {
  Table t;
  const long double lo = kRMin, hi = kRMax;
  const long double dlog = std::log(hi / lo) / kIntervals;
  t.log_rmin = std::log(kRMin);
  t.inv_dlog = static_cast<double>(1 / dlog);
  t.first_exp = static_cast<int>(std::ceil(std::log(kRExp / lo) / dlog));
  t.intervals.resize(kIntervals);

  // Nodes are exact doubles so that the stored r0 is the point the polynomial was built about.
  std::vector<long double> node(kIntervals + 1);
  for (int j = 0; j <= kIntervals; ++j) node[j] = static_cast<double>(lo * std::exp(j * dlog));
  node[0] = kRMin;
  node[kIntervals] = kRMax;

  // Twelve points: K0 has no singularity within distance R of an interval of width ≲ 0.02 R at
  // small R, and varies like e^{−s} over widths ≲ 3.5 at large R; both are converged far below
  // long double epsilon.
  const GaussRule gl = gauss_legendre(12);
  auto k0_moments = [&](long double a, long double h, long double& q0, long double& q1) {
    q0 = q1 = 0;  // ∫_0^h K0(a+s) ds, ∫_0^h (h−s) K0(a+s) ds
    for (std::size_t i = 0; i < gl.x.size(); ++i) {
      const long double s = h * (1 + gl.x[i]) / 2, w = h * gl.w[i] / 2;
      const long double k = bessel_k0(a + s);
      q0 += w * k;
      q1 += w * (h - s) * k;
    }
  };
  std::vector<long double> q0(kIntervals), q1(kIntervals), k0(kIntervals + 1);
  for (int j = 0; j < kIntervals; ++j) k0_moments(node[j], node[j + 1] - node[j], q0[j], q1[j]);
  long double series0[3];
  series_shape<long double>(node[0], series0);
  k0[0] = series0[2];
  for (int j = 1; j <= kIntervals; ++j) k0[j] = bessel_k0(node[j]);

  // Small R: F and I accumulated upwards from the series. The upper coefficients come from
  // Taylor remainders (integrals of K0) rather than from differences of node values, which would
  // cancel.
  long double F = series0[0], I = series0[1];
  for (int j = 0; j < t.first_exp; ++j) {
    const long double h = node[j + 1] - node[j];
    set_quintic(t.intervals[j], node[j], h, F, h * I, h * h * k0[j], q1[j] - h * h * k0[j] / 2,
                h * (q0[j] - h * k0[j]), h * h * (k0[j + 1] - k0[j]));
    F += h * I + q1[j];
    I += q0[j];
  }

  // Large R: the tail T(R) = ∫_R^∞ K0 = π/2 − I(R) accumulated downwards, so that it keeps its
  // relative accuracy however small it gets; then G = F − πR/2 + 1 = R (K1 − T), G' = −T, G'' = K0.
  long double T = 0;
  for (long double a = kRMax; a < kRMax + 64; a += 1) {
    long double m0, m1;
    k0_moments(a, 1, m0, m1);
    T += m0;
  }
  std::vector<long double> H(kIntervals + 1), dH(kIntervals + 1), d2H(kIntervals + 1);
  for (int j = kIntervals; j >= t.first_exp; --j) {
    if (j < kIntervals) T += q0[j];
    const long double R = node[j], x = std::exp(R);
    const long double G = R * (bessel_k1(R) - T), dG = -T, d2G = k0[j];
    H[j] = x * G;
    dH[j] = x * (G + dG);
    d2H[j] = x * (G + 2 * dG + d2G);
  }
  for (int j = t.first_exp; j < kIntervals; ++j) {
    const long double h = node[j + 1] - node[j];
    const long double v0 = H[j], v1 = h * dH[j], v2 = h * h * d2H[j];
    set_quintic(t.intervals[j], node[j], h, v0, v1, v2, H[j + 1] - v0 - v1 - v2 / 2,
                h * dH[j + 1] - v1 - v2, h * h * d2H[j + 1] - v2);
  }
  return t;
}

#ifdef STILLPOINT_SOFT_EXCHANGE_TABLE
// The table as the build computed it (soft_exchange_1d_table.inc, written by running this file
// as a program at build time): the long-double Bessel functions took about 10 ms, a quarter of
// a 1D helium run, once per process.
Table compiled_table() {
  static constexpr double kData[] = {
#include "soft_exchange_1d_table.inc"
  };
  static_assert(sizeof(kData) / sizeof(double) == 3 + 8 * static_cast<std::size_t>(kIntervals));
  Table t;
  t.log_rmin = kData[0];
  t.inv_dlog = kData[1];
  t.first_exp = static_cast<int>(kData[2]);
  t.intervals.resize(kIntervals);
  for (int j = 0; j < kIntervals; ++j) {
    const double* d = kData + 3 + 8 * static_cast<std::size_t>(j);
    t.intervals[j].r0 = d[0];
    t.intervals[j].inv_h = d[1];
    for (int i = 0; i < 6; ++i) t.intervals[j].c[i] = d[2 + i];
  }
  return t;
}
#endif

const Table& table() {
#ifdef STILLPOINT_SOFT_EXCHANGE_TABLE
  static const Table t = compiled_table();
#else
  static const Table t = build_table();
#endif
  return t;
}

bool same_table(const Table& a, const Table& b) {
  auto same = [](double x, double y) { return std::memcmp(&x, &y, sizeof x) == 0; };
  if (!same(a.log_rmin, b.log_rmin) || !same(a.inv_dlog, b.inv_dlog) || a.first_exp != b.first_exp ||
      a.intervals.size() != b.intervals.size())
    return false;
  for (std::size_t j = 0; j < a.intervals.size(); ++j) {
    const Interval &x = a.intervals[j], &y = b.intervals[j];
    if (!same(x.r0, y.r0) || !same(x.inv_h, y.inv_h)) return false;
    for (int i = 0; i < 6; ++i)
      if (!same(x.c[i], y.c[i])) return false;
  }
  return true;
}

inline SoftExchange1dShape shape(const Table& tab, double R) {
  constexpr double half_pi = std::numbers::pi / 2;
  if (R < kRMin) return series_shape<double>(R);
  if (R >= kRMax) return {half_pi * R - 1, half_pi, 0.0};
  int j = static_cast<int>((std::log(R) - tab.log_rmin) * tab.inv_dlog);
  // Rounding of the logarithm may pick a neighbour of the right interval; its polynomial agrees
  // with this one to C² at the shared node, so the slightly out-of-range t is harmless.
  if (j >= kIntervals) j = kIntervals - 1;
  if (j < 0) j = 0;
  const Interval& iv = tab.intervals[j];
  const double t = (R - iv.r0) * iv.inv_h;
  const double* c = iv.c;
  const double p = c[0] + t * (c[1] + t * (c[2] + t * (c[3] + t * (c[4] + t * c[5]))));
  const double dp =
      (c[1] + t * (2 * c[2] + t * (3 * c[3] + t * (4 * c[4] + t * (5 * c[5]))))) * iv.inv_h;
  const double d2p =
      (2 * c[2] + t * (6 * c[3] + t * (12 * c[4] + t * (20 * c[5])))) * (iv.inv_h * iv.inv_h);
  if (j < tab.first_exp) return {p, dp, d2p};
  const double x = std::exp(-R);
  return {half_pi * R - 1 + x * p, half_pi + x * (dp - p), x * (d2p - 2 * dp + p)};
}

void check_softening(double a) {
  if (!(a > 0) || !std::isfinite(a)) {
    std::ostringstream os;
    os << "soft-Coulomb exchange: softening must be finite and > 0, got " << a;
    throw std::invalid_argument(os.str());
  }
}

// e = −F/(πa)², de/dn = −F'/(πa), d²e/dn² = −F'' with R = π a n.
inline SoftExchange1dValue evaluate(const Table& tab, double n, double pa) {
  if (!(n > 0)) {
    if (n <= 0) return {};
    const double nan = std::numeric_limits<double>::quiet_NaN();
    return {nan, nan, nan};
  }
  const double R = pa * n;
  if (R == 0) return {};  // R underflowed: the n → 0 limit, as for n = 0
  const SoftExchange1dShape s = shape(tab, R);
  const double inv = 1 / pa;
  return {-s.F * inv * inv, -s.dF * inv, -s.d2F};
}

}  // namespace

SoftExchange1dValue soft_exchange_1d_unpolarized(double n, double softening) {
  check_softening(softening);
  return evaluate(table(), n, std::numbers::pi * softening);
}

SoftExchange1dSpinValue soft_exchange_1d_polarized(double n_up, double n_down, double softening) {
  check_softening(softening);
  const Table& tab = table();
  const double pa = std::numbers::pi * softening;
  const SoftExchange1dValue u = evaluate(tab, 2 * n_up, pa);
  const SoftExchange1dValue d = evaluate(tab, 2 * n_down, pa);
  SoftExchange1dSpinValue r;
  r.e = 0.5 * (u.e + d.e);
  r.de[0] = u.de_dn;
  r.de[1] = d.de_dn;
  r.d2e[0] = 2 * u.d2e_dn2;
  r.d2e[1] = 0.0;
  r.d2e[2] = 2 * d.d2e_dn2;
  return r;
}

void soft_exchange_1d_unpolarized(std::size_t np, const double* n, double softening, double* e,
                                  double* de, double* d2e) {
  check_softening(softening);
  const Table& tab = table();
  const double pa = std::numbers::pi * softening;
  for (std::size_t i = 0; i < np; ++i) {
    const SoftExchange1dValue v = evaluate(tab, n[i], pa);
    if (e != nullptr) e[i] = v.e;
    if (de != nullptr) de[i] = v.de_dn;
    if (d2e != nullptr) d2e[i] = v.d2e_dn2;
  }
}

namespace detail {

SoftExchange1dShape soft_exchange_1d_shape(double R) {
  if (!(R > 0)) return {};
  return shape(table(), R);
}

// Independent of the table: converged series up to R = 2, Bessel functions and fine fixed
// quadrature beyond, anchored at I(2) for R <= 20 and at I(∞) = π/2 above.
SoftExchange1dShape soft_exchange_1d_shape_reference(double R_in) {
  const long double R = R_in;
  constexpr long double g = std::numbers::egamma_v<long double>;
  const long double pi = std::numbers::pi_v<long double>;
  const GaussRule gl = gauss_legendre(20);
  auto integrate_k0 = [&](long double from, long double to) {
    const int pieces = static_cast<int>(std::ceil(to - from));  // unit width: converged for x >= 2
    const long double w = (to - from) / pieces;
    long double sum = 0;
    for (int p = 0; p < pieces; ++p) {
      const long double a = from + p * w;
      for (std::size_t i = 0; i < gl.x.size(); ++i)
        sum += w * gl.w[i] / 2 * bessel_k0(a + w * (1 + gl.x[i]) / 2);
    }
    return sum;
  };
  // I, K0 and K1 − 1/R by their full series; no cancellation for x <= 2.
  auto series_all = [&](long double x, long double& I, long double& K0, long double& g1) {
    const long double L = std::log(x / 2);
    I = K0 = g1 = 0;
    long double c = 1, d = 0.5L, H = 0, x2k = 1;
    for (int k = 0; k < 40; ++k) {
      const long double m = 2 * k + 1, Hn = H + 1.0L / (k + 1);
      I += c * x2k * x / m * (H - g + 1 / m - L);
      K0 += c * x2k * (H - g - L);
      g1 += d * x2k * x * (L + g - (H + Hn) / 2);
      c /= 4.0L * (k + 1) * (k + 1);
      d /= 4.0L * (k + 1) * (k + 2);
      x2k *= x * x;
      H = Hn;
    }
  };
  long double I, K0, g1;
  if (R <= 2) {
    series_all(R, I, K0, g1);
  } else {
    K0 = bessel_k0(R);
    g1 = bessel_k1(R) - 1 / R;
    if (R <= 20) {
      long double I2, k02, g12;
      series_all(2.0L, I2, k02, g12);
      I = I2 + integrate_k0(2.0L, R);
    } else {
      I = pi / 2 - integrate_k0(R, R + 45);
    }
  }
  return {static_cast<double>(R * (I + g1)), static_cast<double>(I), static_cast<double>(K0)};
}


bool soft_exchange_1d_table_is_current() { return same_table(table(), build_table()); }

}  // namespace detail
}  // namespace stillpoint

#ifdef STILLPOINT_SOFT_EXCHANGE_TABLE_GENERATOR
// Build step: prints the table as C++ initializers, in hexadecimal so every bit survives.
int main() {
  const auto t = stillpoint::build_table();
  std::printf("// Generated at build time from src/xc/soft_exchange_1d.cpp; do not edit.\n");
  std::printf("%a, %a, %d,\n", t.log_rmin, t.inv_dlog, t.first_exp);
  for (const auto& iv : t.intervals) {
    std::printf("%a, %a", iv.r0, iv.inv_h);
    for (double c : iv.c) std::printf(", %a", c);
    std::printf(",\n");
  }
  return 0;
}
#endif
