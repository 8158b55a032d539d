// Callback xc terms: an X-alpha callback written here with its own analytic derivatives
// against libxc's lda_x (an independent general-purpose library; X-alpha with alpha = 2/3 is
// Dirac exchange), the SCF with it against the built-in model family of the same form, and
// the library's checks of what a callback returns.
#include <gtest/gtest.h>

#include <atomic>
#include <cmath>
#include <limits>
#include <numbers>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/response/gradient.hpp"
#include "stillpoint/xc/callback_term.hpp"

namespace sp = stillpoint;

namespace {

// Spin-scaled X-alpha: e = sum_s (3 alpha / 4) c (2 n_s)^(4/3), c = -(3/4)(3/pi)^(1/3).
std::atomic<int> calls{0};
double poison = 0.0;        // added to the energy density of the third point (NaN tests)
bool short_result = false;  // drops one vrho value (size tests)

void xalpha(const sp::XcCallbackRequest& q, sp::XcCallbackResult& r) {
  ++calls;
  const double c = -0.75 * std::cbrt(3.0 / std::numbers::pi);
  const double alpha = (*q.parameters)[0];
  const auto& p = *q.points;
  for (std::size_t i = 0; i < p.np; ++i) {
    if (p.nspin == 1) {
      // e(n) = 2 f(n / 2) = (3/2) c n^(4/3).
      const double n = p.rho[i];
      r.values.e[i] = alpha * 1.5 * c * std::pow(n, 4.0 / 3.0);
      r.values.vrho[i] = alpha * 2.0 * c * std::cbrt(n);
      if (q.order >= 2) r.values.v2rho2[i] = alpha * (2.0 / 3.0) * c * std::pow(n, -2.0 / 3.0);
      if (q.parameter_derivatives) {
        r.de[i] = 1.5 * c * std::pow(n, 4.0 / 3.0);
        r.dvrho[i] = 2.0 * c * std::cbrt(n);
      }
      continue;
    }
    for (int s = 0; s < 2; ++s) {
      // f(n_s) = (3/4) c (2 n_s)^(4/3) per spin.
      const double t = 2.0 * p.rho[2 * i + s];
      const double f = 0.75 * c * std::pow(t, 4.0 / 3.0), df = 2.0 * c * std::cbrt(t);
      r.values.e[i] += alpha * f;
      r.values.vrho[2 * i + s] = alpha * df;
      if (q.order >= 2) r.values.v2rho2[3 * i + 2 * s] = alpha * (4.0 / 3.0) * c * std::pow(t, -2.0 / 3.0);
      if (q.parameter_derivatives) {
        r.de[i] += f;
        r.dvrho[2 * i + s] = df;
      }
    }
  }
  if (p.np > 2) r.values.e[2] += poison;
  if (short_result) r.values.vrho.pop_back();
}

void register_xalpha() {
  auto cb = std::make_shared<sp::XcCallback>();
  cb->name = "xa_test";
  cb->parameter_names = {"alpha"};
  cb->default_parameters = {2.0 / 3.0};
  cb->evaluate = xalpha;
  sp::register_xc_callback(cb);
}

sp::XcPointData points(int nspin) {
  sp::XcPointData p;
  p.nspin = nspin;
  for (double n : {1e-6, 1e-3, 0.02, 0.3, 2.0, 40.0}) {
    if (nspin == 1) {
      p.rho.push_back(n);
    } else {
      p.rho.push_back(0.8 * n);
      p.rho.push_back(0.2 * n);
    }
  }
  p.np = p.rho.size() / nspin;
  return p;
}

sp::SystemSpec beryllium(const std::string& xc) {
  sp::SystemSpec s;
  s.name = "Be";
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = 4;
  s.atom.configuration = sp::parse_configuration(sp::default_configuration(4, 0));
  s.xc = {xc, "lda_c_pw"};
  s.grid = sp::grid_preset(sp::Geometry::Radial, "coarse");
  return s;
}

sp::ScfOptions tight() {
  sp::ScfOptions o;
  o.potential_tolerance = 1e-12;
  o.energy_tolerance = 1e-13;
  o.eigenvalue_tolerance = 1e-12;
  return o;
}

}  // namespace

TEST(CallbackTerm, XAlphaTwoThirdsIsLibxcDiracExchange) {
  register_xalpha();
  const sp::XcSettings xs;
  for (int nspin : {1, 2}) {
    SCOPED_TRACE(nspin);
    const sp::XcFunctional a = sp::make_functional({"callback:xa_test"}, xs);
    const sp::XcFunctional b = sp::make_functional({"lda_x"}, xs);
    const sp::XcPointData p = points(nspin);
    sp::XcDerivatives da, db;
    a.evaluate(p, 2, da);
    b.evaluate(p, 2, db);
    for (std::size_t i = 0; i < da.e.size(); ++i) EXPECT_NEAR(da.e[i], db.e[i], 1e-12 * std::abs(db.e[i]));
    for (std::size_t i = 0; i < da.vrho.size(); ++i) EXPECT_NEAR(da.vrho[i], db.vrho[i], 1e-12 * std::abs(db.vrho[i]));
    for (std::size_t i = 0; i < da.v2rho2.size(); ++i)
      EXPECT_NEAR(da.v2rho2[i], db.v2rho2[i], 1e-12 * std::abs(db.v2rho2[i]) + 1e-300);
  }
}

TEST(CallbackTerm, ScfAndParameterGradientMatchTheBuiltInFamily) {
  register_xalpha();
  using K = sp::ParameterRef::Kind;
  sp::ParameterRef alpha;
  alpha.kind = K::XcParameter;
  alpha.index = 0;
  alpha.sub = 0;
  alpha.name = "alpha";
  sp::LossTerm level;
  level.kind = sp::LossTerm::Kind::Eigenvalue;
  level.state = "2s";
  sp::LossTerm energy;
  energy.kind = sp::LossTerm::Kind::Energy;
  sp::GradientOptions opt;
  opt.scf = tight();
  // The built-in family model:xalpha is the reference (model_functional_test checks it against libxc).
  sp::GradientProblem builtin({beryllium("model:xalpha")}, {alpha}, {level, energy}, opt);
  sp::GradientProblem callback({beryllium("callback:xa_test")}, {alpha}, {level, energy}, opt);
  const Eigen::VectorXd theta = Eigen::VectorXd::Constant(1, 0.7);
  const auto a = builtin.evaluate(theta);
  calls = 0;
  const auto b = callback.evaluate(theta);
  EXPECT_NEAR(a.term_quantities[0], b.term_quantities[0], 1e-10);
  EXPECT_NEAR(a.term_quantities[1], b.term_quantities[1], 1e-10);
  EXPECT_NEAR(a.gradient(0), b.gradient(0), 1e-10 * std::max(1.0, std::abs(a.gradient(0))));
  EXPECT_GT(calls.load(), 0);
}

TEST(CallbackTerm, NonFiniteValuesNameTheTermAndThePoint) {
  register_xalpha();
  poison = std::numeric_limits<double>::quiet_NaN();
  const sp::KsProblem P(beryllium("callback:xa_test"));
  try {
    (void)sp::solve_scf(P);
    ADD_FAILURE() << "expected a NumericalError";
  } catch (const sp::NumericalError& e) {
    const std::string m = e.what();
    EXPECT_NE(m.find("'callback:xa_test' returned a non-finite energy density"), std::string::npos) << m;
    EXPECT_NE(m.find("at r = "), std::string::npos) << m;
  }
  poison = 0.0;
}

TEST(CallbackTerm, WrongSizesAndUnknownNamesAreRefused) {
  register_xalpha();
  short_result = true;
  const sp::XcFunctional a = sp::make_functional({"callback:xa_test"}, sp::XcSettings{});
  sp::XcDerivatives d;
  EXPECT_THROW(a.evaluate(points(1), 1, d), sp::NumericalError);
  short_result = false;
  try {
    (void)sp::make_functional({"callback:xa_tset"}, sp::XcSettings{});
    ADD_FAILURE() << "expected an InputError";
  } catch (const sp::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("did you mean 'xa_test'"), std::string::npos) << e.what();
  }
  auto bad = std::make_shared<sp::XcCallback>();
  bad->name = "no spaces";
  bad->evaluate = xalpha;
  EXPECT_THROW(sp::register_xc_callback(bad), sp::InputError);
  EXPECT_TRUE(sp::remove_xc_callback("xa_test"));
  EXPECT_THROW((void)sp::make_functional({"callback:xa_test"}, sp::XcSettings{}), sp::InputError);
}
