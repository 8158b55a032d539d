// Exchange-correlation energies of a known density, integrated by the program's own radial
// quadrature, against closed forms and independently computed values: the hydrogen 1s density
// n = exp(-2r)/pi, spin-unpolarized (n/2 per spin) and fully polarized (all of it in one spin).
// Sources: basis-data/reference/check-values.md §4c (B88, PBE exchange and PW92, VWN5, PZ81 correlation computed there by a
// separate code, label [computed]; Becke, PRA 38, 3098 (1988), Table I quotes B88 -0.3098).
#include <gtest/gtest.h>

#include <cmath>
#include <numbers>

#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/xc/on_mesh.hpp"

namespace sp = stillpoint;

namespace {

struct Hydrogen {
  sp::Mesh mesh = sp::Mesh::radial(sp::grid_preset(sp::Geometry::Radial, "default"), 1.0);
  Eigen::VectorXd n;
  Hydrogen() {
    n = mesh.x().unaryExpr([](double r) { return std::exp(-2.0 * r) / std::numbers::pi; });
  }
  double xc(const std::vector<std::string>& names, bool polarized) const {
    sp::XcSettings xs;
    const sp::XcFunctional f = sp::make_functional(names, xs);
    std::vector<Eigen::VectorXd> d;
    if (polarized)
      d = {n, Eigen::VectorXd::Zero(n.size())};
    else
      d = {n};
    return sp::xc_energy(mesh, f, d, 1e-30);
  }
};

}  // namespace

TEST(HydrogenDensity, QuadratureNormalizesIt) {
  const Hydrogen h;
  EXPECT_NEAR(h.mesh.density_weight().dot(h.n), 1.0, 1e-10);
}

TEST(HydrogenDensity, ExchangeAndCorrelationEnergies) {
  const Hydrogen h;
  // (The Slater-exchange closed forms and the Hartree energy of this density are checked in
  // analytic_checks_test.cpp.)
  struct Case {
    std::vector<std::string> xc;
    bool polarized;
    double value;
    double tol;
  };
  for (const Case& c : {Case{{"gga_x_b88"}, true, -0.309756, 1e-6},      // [computed]; Becke quotes -0.3098
                        Case{{"gga_x_pbe"}, true, -0.3059406, 1e-6},     // [computed]
                        Case{{"gga_x_pbe"}, false, -0.2539957, 1e-6},    // [computed]
                        Case{{"lda_c_pw"}, true, -0.0221840, 1e-6},      // PW92 [computed]
                        Case{{"lda_c_pw"}, false, -0.0413915, 1e-6},
                        Case{{"lda_c_vwn"}, true, -0.0221422, 1e-6},     // VWN5 [computed]
                        Case{{"lda_c_vwn"}, false, -0.0414115, 1e-6},
                        Case{{"lda_c_pz"}, true, -0.0223272, 1e-6},      // PZ81 [computed]
                        Case{{"lda_c_pz"}, false, -0.0416192, 1e-6}}) {
    EXPECT_NEAR(h.xc(c.xc, c.polarized), c.value, c.tol) << c.xc[0] << (c.polarized ? " polarized" : " unpolarized");
  }
}
