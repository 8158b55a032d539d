// The sparse eigensolver against dense LAPACK (Armadillo's eig_sym through
// dense_lowest_eigenpairs) on radial Kohn-Sham matrices, including one with a narrow deep well
// far out, whose trapped state lies among the lowest (the kind of well a transient GGA
// potential digs in an early SCF iterate).
#include <gtest/gtest.h>

#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/numerics/eigensolver.hpp"
#include "stillpoint/numerics/kinetic.hpp"
#include "stillpoint/numerics/mesh.hpp"

namespace sp = stillpoint;

TEST(Eigensolver, ColdAndWarmSolvesAgreeWithDenseLapack) {
  const sp::Mesh mesh = sp::Mesh::radial(sp::grid_preset(sp::Geometry::Radial, "default"), 18.0);
  for (int l : {0, 1}) {
    const auto T = sp::scaled_kinetic(mesh, l);
    const int n = mesh.num_unknowns();
    for (bool ghost : {false, true}) {
      Eigen::VectorXd d(n);
      for (int i = 0; i < n; ++i) {
        const double r = mesh.x()(i + 1);
        d(i) = -18.0 / r * (1.0 / (1.0 + r)) - 1.0 / (1.0 + r);  // a screened nucleus
      }
      if (ghost) d(n - 40) -= 60.0;  // one deep node far out: a trapped state near -3 hartree
      sp::LowestEigensolver solver(T);
      sp::EigenWarmStart warm;
      const int count = 4;
      const sp::Eigenpairs cold = solver.solve(d, count, warm);
      Eigen::MatrixXd H = Eigen::MatrixXd(T);
      H.diagonal() += d;
      const sp::Eigenpairs dense = sp::dense_lowest_eigenpairs(H, count);
      for (int k = 0; k < count; ++k)
        EXPECT_NEAR(cold.values(k), dense.values(k), 1e-9 * (1.0 + std::abs(dense.values(k))))
            << "l = " << l << (ghost ? " with the far well" : "") << ", state " << k;
      // Warm: a slightly changed potential, from the previous pairs.
      const Eigen::VectorXd d2 = d * 1.01;
      const sp::Eigenpairs again = solver.solve(d2, count, warm);
      H.diagonal() += d2 - d;
      const sp::Eigenpairs dense2 = sp::dense_lowest_eigenpairs(H, count);
      for (int k = 0; k < count; ++k)
        EXPECT_NEAR(again.values(k), dense2.values(k), 1e-9 * (1.0 + std::abs(dense2.values(k))))
            << "warm, l = " << l << (ghost ? " with the far well" : "") << ", state " << k;
    }
  }
}
