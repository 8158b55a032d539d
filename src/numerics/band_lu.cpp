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

}  // namespace stillpoint
