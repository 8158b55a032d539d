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
  auto A = [&](int i, int k) { return lower[static_cast<std::size_t>(i - k) + static_cast<std::size_t>(k) * L]; };
  // Row-oriented (envelope) L D L^T: without pivoting the fill of row i stays right of its first
  // nonzero, so only the envelope is computed. Spectral-element matrices are overlapping dense
  // element blocks inside the band, so the envelope holds about a third of the band's work, and
  // its row dot products are unit-stride. Entries outside it are exact zeros of the band form
  // too. The buffers are reused between calls of one thread (tens per solve).
  thread_local std::vector<double> d, inv_d, lr, w;  // lr[i * kd + (k - i + kd)] = L(i, k)
  thread_local std::vector<int> first;
  d.resize(n);
  inv_d.resize(n);
  first.resize(n);
  lr.resize(static_cast<std::size_t>(kd) * n + 1);
  w.resize(kd + 1);
  int negative = 0;
  double scale = 0.0;
  for (int j = 0; j < n; ++j) scale = std::max(scale, std::abs(A(j, j) - x));
  const double tiny = 1e-300 + 1e-15 * scale;
  for (int i = 0; i < n; ++i) {
    int fi = std::max(0, i - kd);
    while (fi < i && A(i, fi) == 0.0) ++fi;
    first[i] = fi;
    double* li = &lr[static_cast<std::size_t>(i) * kd] + (kd - i);  // li[k] = L(i, k)
    double di = A(i, i) - x;
    for (int k = fi; k < i; ++k) {
      // w[k - fi] = L(i, k) d_k from the already finished rows k of the envelope.
      double s = A(i, k);
      const double* lk = &lr[static_cast<std::size_t>(k) * kd] + (kd - k);
      for (int m = std::max(fi, first[k]); m < k; ++m) s -= w[m - fi] * lk[m];
      w[k - fi] = s;
      li[k] = s * inv_d[k];  // a division here would sit in the dependency chain of every row
      di -= s * li[k];
    }
    if (di == 0.0 || std::abs(di) < tiny) di = tiny;  // an eigenvalue at x counts as above it
    d[i] = di;
    inv_d[i] = 1.0 / di;
    if (di < 0.0) ++negative;
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
