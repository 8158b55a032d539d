// The banded LU of numerics/band_lu.hpp against LAPACK's dgbtrf/dgbtrs (the reference
// implementation of the same algorithm) on random and nearly singular banded matrices.
#include <gtest/gtest.h>

#include <Eigen/Dense>
#include <random>

#include "stillpoint/numerics/band_lu.hpp"

extern "C" {
void dgbtrf_(const int* m, const int* n, const int* kl, const int* ku, double* ab, const int* ldab, int* ipiv, int* info);
void dpbtrf_(const char* uplo, const int* n, const int* kd, double* ab, const int* ldab, int* info, std::size_t);
void dpbtrs_(const char* uplo, const int* n, const int* kd, const int* nrhs, const double* ab, const int* ldab,
             double* b, const int* ldb, int* info, std::size_t);
void dgbtrs_(const char* trans, const int* n, const int* kl, const int* ku, const int* nrhs, const double* ab,
             const int* ldab, const int* ipiv, double* b, const int* ldb, int* info, std::size_t);
}

namespace {

// A random n x n band matrix (kl below, ku above the diagonal), optionally symmetric and
// shifted to within `gap` of one of its eigenvalues.
Eigen::MatrixXd band_matrix(int n, int kl, int ku, unsigned seed, bool near_singular) {
  std::mt19937 rng(seed);
  std::uniform_real_distribution<double> u(-1.0, 1.0);
  Eigen::MatrixXd A = Eigen::MatrixXd::Zero(n, n);
  for (int j = 0; j < n; ++j)
    for (int i = std::max(0, j - ku); i <= std::min(n - 1, j + kl); ++i) A(i, j) = u(rng);
  if (near_singular) {
    A = 0.5 * (A + A.transpose()).eval();  // kl = ku here
    const Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> es(A);
    A.diagonal().array() -= es.eigenvalues()(n / 3) + 1e-10;
  }
  return A;
}

}  // namespace

TEST(BandLu, AgreesWithLapack) {
  struct Case {
    int n, kl, ku;
    bool near_singular;
  };
  for (const Case c : {Case{7, 2, 3, false}, Case{50, 8, 8, false}, Case{433, 8, 8, false}, Case{200, 3, 5, false},
                       Case{433, 8, 8, true}, Case{97, 12, 12, true}}) {
    for (unsigned seed : {1u, 2u}) {
      const Eigen::MatrixXd A = band_matrix(c.n, c.kl, c.ku, seed, c.near_singular);
      stillpoint::BandLuFactor f;
      f.reset(c.n, c.kl, c.ku);
      for (int j = 0; j < c.n; ++j)
        for (int i = std::max(0, j - c.ku); i <= std::min(c.n - 1, j + c.kl); ++i) f.at(i, j) = A(i, j);
      std::vector<double> lab = f.ab;
      std::vector<int> lpiv(c.n);
      int info = 0, ld = f.ld();
      dgbtrf_(&c.n, &c.n, &c.kl, &c.ku, lab.data(), &ld, lpiv.data(), &info);
      EXPECT_EQ(f.factor(), info);
      for (int j = 0; j < c.n; ++j) ASSERT_EQ(f.ipiv[j] + 1, lpiv[j]) << "pivot " << j << ", n = " << c.n;
      double worst = 0.0, scale = 0.0;
      for (std::size_t k = 0; k < lab.size(); ++k) {
        worst = std::max(worst, std::abs(f.ab[k] - lab[k]));
        scale = std::max(scale, std::abs(lab[k]));
      }
      // Rounding differs only in the order of the updates; a near-singular shift amplifies it.
      EXPECT_LE(worst, (c.near_singular ? 1e-9 : 1e-12) * scale) << "factors, n = " << c.n;
      Eigen::VectorXd b = Eigen::VectorXd::LinSpaced(c.n, -1.0, 2.0), x = b, y = b;
      f.solve(x.data());
      int nrhs = 1;
      dgbtrs_("N", &c.n, &c.kl, &c.ku, &nrhs, lab.data(), &ld, lpiv.data(), y.data(), &c.n, &info, 1);
      if (c.near_singular) {
        // Condition number ~1e10: the solutions agree in direction (what inverse iteration
        // uses), their lengths to the conditioning.
        EXPECT_LE((x.normalized() - y.normalized()).norm(), 1e-8) << "solve direction, n = " << c.n;
        EXPECT_LE((x - y).norm(), 1e-5 * y.norm()) << "solve, n = " << c.n;
      } else {
        EXPECT_LE((x - y).norm(), 1e-12 * y.norm()) << "solve, n = " << c.n;
      }
      if (!c.near_singular) {
        EXPECT_LE((A * x - b).norm(), 1e-10 * b.norm()) << "residual, n = " << c.n;
      }
    }
  }
}

// The banded Cholesky solve against LAPACK's dpbtrs on the same dpbtrf factor.
TEST(BandLu, CholeskySolveAgreesWithLapack) {
  for (int n : {5, 97, 433})
    for (int kd : {1, 8, 12}) {
      Eigen::MatrixXd A = band_matrix(n, kd, kd, 3u, false);
      A = (A * A.transpose()).eval();  // positive definite, bandwidth 2 kd
      const int k2 = std::min(2 * kd, n - 1), ld = k2 + 1;
      std::vector<double> ab(static_cast<std::size_t>(ld) * n, 0.0);
      for (int j = 0; j < n; ++j)
        for (int i = std::max(0, j - k2); i <= j; ++i) ab[(k2 + i - j) + static_cast<std::size_t>(j) * ld] = A(i, j);
      int info = 0;
      dpbtrf_("U", &n, &k2, ab.data(), &ld, &info, 1);
      ASSERT_EQ(info, 0);
      Eigen::VectorXd b = Eigen::VectorXd::LinSpaced(n, 1.0, -3.0), x = b, y = b;
      stillpoint::band_cholesky_solve(ab.data(), n, k2, x.data());
      int nrhs = 1;
      dpbtrs_("U", &n, &k2, &nrhs, ab.data(), &ld, y.data(), &n, &info, 1);
      EXPECT_LE((x - y).norm(), 1e-12 * y.norm()) << "n = " << n << ", kd = " << k2;
      EXPECT_LE((A * x - b).norm(), 1e-9 * b.norm() * A.norm()) << "n = " << n;
    }
}

// Sylvester inertia of band_count_below against the eigenvalues of a dense solver, on full
// random bands and on matrices made of overlapping dense element blocks (the spectral-element
// structure, where the count skips the zeros left of each row's first nonzero).
TEST(BandLu, InertiaCountAgreesWithEigenvalues) {
  for (int kd : {1, 4, 9}) {
    for (bool blocks : {false, true}) {
      const int ne = 12, n = blocks ? ne * kd - 1 : 70;
      std::mt19937 rng(100 + kd + (blocks ? 1 : 0));
      std::uniform_real_distribution<double> u(-1.0, 1.0);
      Eigen::MatrixXd A = Eigen::MatrixXd::Zero(n, n);
      if (blocks) {
        for (int e = 0; e < ne; ++e)
          for (int a = 0; a <= kd; ++a)
            for (int b = 0; b <= a; ++b) {
              const int i = e * kd + a - 1, j = e * kd + b - 1;  // the first node removed, as by a boundary condition
              if (i < 0 || j < 0 || i >= n || j >= n) continue;
              const double v = u(rng);
              A(i, j) += v;
              if (i != j) A(j, i) += v;
            }
      } else {
        A = band_matrix(n, kd, kd, 7u + kd, false);
        A = 0.5 * (A + A.transpose()).eval();
      }
      std::vector<double> lower(static_cast<std::size_t>(kd + 1) * n, 0.0);
      for (int j = 0; j < n; ++j)
        for (int i = j; i <= std::min(n - 1, j + kd); ++i) lower[(i - j) + static_cast<std::size_t>(j) * (kd + 1)] = A(i, j);
      const Eigen::VectorXd ev = Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd>(A).eigenvalues();
      for (int k = 0; k + 1 < n; k += 3) {
        // Midway between neighbours: far from every eigenvalue compared with rounding.
        const double x = 0.5 * (ev(k) + ev(k + 1));
        EXPECT_EQ(stillpoint::band_count_below(lower, n, kd, x), k + 1) << "kd = " << kd << ", blocks = " << blocks;
      }
      EXPECT_EQ(stillpoint::band_count_below(lower, n, kd, ev(0) - 1.0), 0);
      EXPECT_EQ(stillpoint::band_count_below(lower, n, kd, ev(n - 1) + 1.0), n);
    }
  }
}
