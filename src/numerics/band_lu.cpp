#include "stillpoint/numerics/band_lu.hpp"

#include <algorithm>
#include <cmath>

namespace stillpoint {

void BandLuFactor::reset(int size, int lower, int upper) {
  n = size;
  kl = lower;
  ku = upper;
  ab.assign(static_cast<std::size_t>(ld()) * static_cast<std::size_t>(n), 0.0);
  ipiv.assign(n, 0);
}

int BandLuFactor::factor() {
  const int kv = kl + ku, L = ld();
  double* a = ab.data();
  auto A = [&](int i, int j) -> double& { return a[(kv + i - j) + static_cast<std::size_t>(j) * L]; };
  int info = 0, ju = 0;
  for (int j = 0; j < n; ++j) {
    const int km = std::min(kl, n - 1 - j);
    int jp = 0;
    double best = std::abs(A(j, j));
    for (int p = 1; p <= km; ++p)
      if (std::abs(A(j + p, j)) > best) {
        best = std::abs(A(j + p, j));
        jp = p;
      }
    ipiv[j] = j + jp;
    if (A(j + jp, j) != 0.0) {
      ju = std::max(ju, std::min(j + ku + jp, n - 1));
      if (jp != 0)
        for (int c = j; c <= ju; ++c) std::swap(A(j, c), A(j + jp, c));
      if (km > 0) {
        const double inv = 1.0 / A(j, j);
        for (int p = 1; p <= km; ++p) A(j + p, j) *= inv;
        for (int c = j + 1; c <= ju; ++c) {
          const double f = A(j, c);
          if (f == 0.0) continue;
          for (int p = 1; p <= km; ++p) A(j + p, c) -= A(j + p, j) * f;
        }
      }
    } else if (info == 0) {
      info = j + 1;
    }
  }
  return info;
}

void BandLuFactor::solve(double* b) const {
  const int kv = kl + ku, L = ld();
  const double* a = ab.data();
  auto A = [&](int i, int j) { return a[(kv + i - j) + static_cast<std::size_t>(j) * L]; };
  for (int j = 0; j + 1 < n; ++j) {
    const int lm = std::min(kl, n - 1 - j);
    if (ipiv[j] != j) std::swap(b[ipiv[j]], b[j]);
    const double bj = b[j];
    if (bj != 0.0)
      for (int p = 1; p <= lm; ++p) b[j + p] -= A(j + p, j) * bj;
  }
  for (int j = n - 1; j >= 0; --j) {
    if (b[j] == 0.0) continue;
    b[j] /= A(j, j);
    const double bj = b[j];
    for (int r = std::max(0, j - kv); r < j; ++r) b[r] -= A(r, j) * bj;
  }
}

int band_count_below(const std::vector<double>& lower, int n, int kd, double x) {
  const int L = kd + 1;
  // L (unit lower, in band storage) and D, column by column; the buffers are reused between
  // calls of one thread, since bisection calls this tens of times per solve.
  thread_local std::vector<double> d, l;  // l[(i - j) + j * L] = L(i, j)
  d.resize(n);
  l.resize(static_cast<std::size_t>(L) * n);
  int negative = 0;
  double scale = 0.0;
  for (int j = 0; j < n; ++j) scale = std::max(scale, std::abs(lower[static_cast<std::size_t>(j) * L] - x));
  const double tiny = 1e-300 + 1e-15 * scale;
  for (int j = 0; j < n; ++j) {
    const int k0 = std::max(0, j - kd);
    double dj = lower[static_cast<std::size_t>(j) * L] - x;
    for (int k = k0; k < j; ++k) {
      const double ljk = l[(j - k) + static_cast<std::size_t>(k) * L];
      dj -= ljk * ljk * d[k];
    }
    if (dj == 0.0 || std::abs(dj) < tiny) dj = tiny;  // an eigenvalue at x counts as above it
    d[j] = dj;
    if (dj < 0.0) ++negative;
    const int i1 = std::min(n - 1, j + kd);
    for (int i = j + 1; i <= i1; ++i) {
      double a = lower[(i - j) + static_cast<std::size_t>(j) * L];
      for (int k = std::max(0, i - kd); k < j; ++k)
        a -= l[(i - k) + static_cast<std::size_t>(k) * L] * l[(j - k) + static_cast<std::size_t>(k) * L] * d[k];
      l[(i - j) + static_cast<std::size_t>(j) * L] = a / dj;
    }
  }
  return negative;
}

void band_cholesky_solve(const double* ab, int n, int kd, double* b) {
  const int L = kd + 1;
  auto U = [&](int i, int j) { return ab[(kd + i - j) + static_cast<std::size_t>(j) * L]; };
  for (int j = 0; j < n; ++j) {  // U^T y = b
    double s = b[j];
    for (int i = std::max(0, j - kd); i < j; ++i) s -= U(i, j) * b[i];
    b[j] = s / U(j, j);
  }
  for (int j = n - 1; j >= 0; --j) {  // U x = y
    b[j] /= U(j, j);
    const double xj = b[j];
    for (int i = std::max(0, j - kd); i < j; ++i) b[i] -= U(i, j) * xj;
  }
}

}  // namespace stillpoint
