// Model families evaluated by jets against libxc's implementations of the same published
// forms at their published parameters (libxc is an independent general-purpose library), and
// jet derivatives against central finite differences of the jet energy itself.
#include <gtest/gtest.h>

#include <cmath>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/model_functional.hpp"

namespace sp = stillpoint;

namespace {

sp::XcPointData points(int nspin, bool gga) {
  sp::XcPointData p;
  p.nspin = nspin;
  const double ns[] = {1e-4, 3e-3, 0.02, 0.1, 0.7, 3.0, 25.0};
  for (double n : ns)
    for (double s : {0.0, 0.3, 1.5}) {
      // Reduced gradient s -> sigma for the total density.
      const double kf = std::cbrt(3.0 * M_PI * M_PI * n);
      const double sigma = std::pow(2.0 * kf * n * s, 2);
      if (nspin == 1) {
        p.rho.push_back(n);
        if (gga) p.sigma.push_back(sigma);
      } else {
        p.rho.push_back(0.7 * n);
        p.rho.push_back(0.3 * n);
        if (gga) {
          p.sigma.push_back(0.5 * sigma);
          p.sigma.push_back(0.2 * sigma);
          p.sigma.push_back(0.15 * sigma);
        }
      }
      if (!gga) break;
    }
  p.np = p.rho.size() / nspin;
  return p;
}

void compare(const std::string& model, const std::string& libxc, bool gga, bool one_d, double tol,
             bool skip_zero_gradient_kernel = false) {
  sp::XcSettings xs;
  xs.one_dimensional = one_d;
  for (int nspin : {1, 2}) {
    SCOPED_TRACE(model + (nspin == 1 ? " unpolarized" : " polarized"));
    const sp::XcFunctional a = sp::make_functional({"model:" + model}, xs);
    const sp::XcFunctional b = sp::make_functional({libxc}, xs);
    const sp::XcPointData p = points(nspin, gga);
    sp::XcDerivatives da, db;
    a.evaluate(p, 2, da);
    b.evaluate(p, 2, db);
    auto check = [&](const std::vector<double>& x, const std::vector<double>& y, const char* what) {
      ASSERT_EQ(x.size(), y.size()) << what;
      const std::size_t per = x.size() / p.np;
      for (std::size_t i = 0; i < x.size(); ++i) {
        const std::size_t point = i / per;
        if (skip_zero_gradient_kernel && std::string(what) == "v2sigma2" && p.sigma[point * (nspin == 1 ? 1 : 3)] == 0.0)
          continue;
        EXPECT_NEAR(x[i], y[i], tol * (std::abs(y[i]) + 1e-8)) << what << " " << i;
      }
    };
    check(da.e, db.e, "e");
    check(da.vrho, db.vrho, "vrho");
    check(da.v2rho2, db.v2rho2, "v2rho2");
    if (gga) {
      check(da.vsigma, db.vsigma, "vsigma");
      check(da.v2rhosigma, db.v2rhosigma, "v2rhosigma");
      check(da.v2sigma2, db.v2sigma2, "v2sigma2");
    }
  }
}

}  // namespace

// Published forms at published parameters must reproduce libxc's implementation of them.
TEST(ModelFunctional, XAlphaTwoThirdsIsDiracExchange) { compare("xalpha", "lda_x", false, false, 1e-12); }
TEST(ModelFunctional, Pw92MatchesLibxc) { compare("pw92_c", "lda_c_pw", false, false, 1e-9); }
TEST(ModelFunctional, PbeExchangeMatchesLibxc) { compare("pbe_x", "gga_x_pbe", true, false, 1e-9); }
TEST(ModelFunctional, B88MatchesLibxc) {
  // At exactly zero gradient libxc's B88 kernel d2e/dsigma2 differs by 0.7% from the analytic
  // limit (it clamps sigma internally); elsewhere it agrees to 1e-9.
  compare("b88_x", "gga_x_b88", true, false, 1e-9, /*skip_zero_gradient_kernel=*/true);
  // Analytic limit (derived here): unpolarized, d2e/dsigma2 at sigma = 0 is 24 beta^2 / n^4.
  sp::XcSettings xs;
  const sp::XcFunctional f = sp::make_functional({"model:b88_x"}, xs);
  sp::XcPointData p;
  p.np = 1;
  p.rho = {0.05};
  p.sigma = {0.0};
  sp::XcDerivatives d;
  f.evaluate(p, 2, d);
  EXPECT_NEAR(d.v2sigma2[0], 24.0 * 0.0042 * 0.0042 / std::pow(0.05, 4), 1e-10 * d.v2sigma2[0]);
}
TEST(ModelFunctional, SeriesWithPbeCoefficientsIsPbe) { compare("series_x", "gga_x_pbe", true, false, 1e-9); }
TEST(ModelFunctional, ScaledSoftExchangeMatchesLibxc) { compare("soft_x_1d", "lda_x_1d_soft", false, true, 1e-9); }

TEST(ModelFunctional, ParameterDerivativesMatchFiniteDifferences) {
  sp::XcSettings xs;
  for (const std::string m : {"pbe_x", "b88_x", "series_x", "pw92_c", "xalpha"})
    for (int nspin : {1, 2}) {
      SCOPED_TRACE(m + std::to_string(nspin));
      const auto term = sp::make_model_term(m, {}, xs);
      const sp::XcPointData p = points(nspin, term->needs_gradient());
      const auto theta = term->parameters();
      for (int k = 0; k < static_cast<int>(theta.size()); ++k) {
        std::vector<double> de, dvrho, dvsigma;
        term->parameter_derivatives(p, k, de, dvrho, dvsigma);
        const double h = 1e-6 * std::max(1.0, std::abs(theta[k]));
        auto tp = theta, tm = theta;
        tp[k] += h;
        tm[k] -= h;
        sp::XcDerivatives a, b;
        sp::XcFunctional fa, fb;
        fa.add(term->with_parameters(tp));
        fb.add(term->with_parameters(tm));
        fa.evaluate(p, 1, a);
        fb.evaluate(p, 1, b);
        for (std::size_t i = 0; i < p.np; ++i) {
          SCOPED_TRACE("parameter " + std::to_string(k) + " point " + std::to_string(i));
          // Rounding floor of a central difference: ~1e-16 |value| / h.
          const double fd = (a.e[i] - b.e[i]) / (2 * h);
          EXPECT_NEAR(de[i], fd, 1e-6 * std::abs(fd) + 1e-9 * (1e-3 + std::abs(a.e[i])));
          for (int s = 0; s < nspin; ++s) {
            const double fv = (a.vrho[nspin * i + s] - b.vrho[nspin * i + s]) / (2 * h);
            EXPECT_NEAR(dvrho[nspin * i + s], fv, 1e-6 * std::abs(fv) + 1e-9 * (1e-3 + std::abs(a.vrho[nspin * i + s])));
          }
        }
      }
    }
}

TEST(ModelFunctional, UnknownFamilyIsAnInputError) {
  sp::XcSettings xs;
  EXPECT_THROW(sp::make_functional({"model:pbe_xx"}, xs), sp::InputError);
  EXPECT_THROW(sp::make_functional({"model:rational_c_1d"}, xs), sp::InputError);  // 1D family on an atom
}
