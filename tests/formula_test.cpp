// User formulas: parsed once, evaluated with exact jet derivatives. Checked against libxc's
// implementations of the same published forms (Dirac exchange; PBE exchange, Perdew, Burke,
// Ernzerhof PRL 77, 3865 (1996)), and through the SCF against finite differences.
#include <gtest/gtest.h>

#include <cmath>

#include "stillpoint/atom_config.hpp"
#include "stillpoint/formula.hpp"
#include "stillpoint/gradient.hpp"
#include "stillpoint/grid_presets.hpp"

namespace sp = stillpoint;

namespace {

sp::FormulaSpec formula(const std::string& name, const std::string& expr, std::vector<std::string> names = {},
                        std::vector<double> values = {}) {
  sp::FormulaSpec f;
  f.name = name;
  f.expression = expr;
  f.parameter_names = std::move(names);
  f.parameter_values = std::move(values);
  f.where = sp::SourceLocation{"input.toml", 12, 0, "formula." + name + ".expression"};
  return f;
}

void compare_with_libxc(const sp::FormulaSpec& f, const std::string& libxc, bool gga) {
  sp::XcSettings xs;
  xs.formulas.push_back(sp::compile_formula(f));
  const sp::XcFunctional a = sp::make_functional({"formula:" + f.name}, xs);
  const sp::XcFunctional b = sp::make_functional({libxc}, xs);
  for (int nspin : {1, 2}) {
    sp::XcPointData p;
    p.nspin = nspin;
    for (double n : {1e-3, 0.05, 0.8, 12.0})
      for (double sig : {0.0, 0.01, 2.0}) {
        if (nspin == 1) {
          p.rho.push_back(n);
          p.sigma.push_back(sig);
        } else {
          p.rho.push_back(0.6 * n);
          p.rho.push_back(0.4 * n);
          p.sigma.insert(p.sigma.end(), {0.4 * sig, 0.2 * sig, 0.2 * sig});
        }
      }
    p.np = p.rho.size() / nspin;
    if (!gga) p.sigma.clear();
    sp::XcDerivatives da, db;
    a.evaluate(p, 2, da);
    b.evaluate(p, 2, db);
    for (std::size_t i = 0; i < da.e.size(); ++i) EXPECT_NEAR(da.e[i], db.e[i], 1e-11 * std::abs(db.e[i]) + 1e-15);
    for (std::size_t i = 0; i < da.vrho.size(); ++i) EXPECT_NEAR(da.vrho[i], db.vrho[i], 1e-10 * std::abs(db.vrho[i]) + 1e-14);
    for (std::size_t i = 0; i < da.v2rho2.size(); ++i)
      EXPECT_NEAR(da.v2rho2[i], db.v2rho2[i], 1e-9 * std::abs(db.v2rho2[i]) + 1e-12);
    if (gga) {
      for (std::size_t i = 0; i < da.vsigma.size(); ++i)
        EXPECT_NEAR(da.vsigma[i], db.vsigma[i], 1e-9 * std::abs(db.vsigma[i]) + 1e-14);
    }
  }
}

}  // namespace

TEST(Formula, DiracExchangeMatchesLibxc) {
  // Unpolarized Dirac exchange per particle; the spin dependence written out with zeta
  // (exchange spin scaling, common practice): eps = eps0 * ((1+z)^(4/3) + (1-z)^(4/3)) / 2.
  compare_with_libxc(formula("dirac", "-0.75*(3/pi)^(1/3) * n^(1/3) * ((1+zeta)^(4/3) + (1-zeta)^(4/3))/2"), "lda_x", false);
}

TEST(Formula, PbeExchangeFormMatchesLibxcUnpolarized) {
  sp::XcSettings xs;
  const auto f = formula("pbe", "-0.75*(3/pi)^(1/3) * n^(1/3) * (1 + kappa - kappa/(1 + mu*s2/kappa))", {"kappa", "mu"},
                         {0.804, 0.2195149727645171});
  xs.formulas.push_back(sp::compile_formula(f));
  const sp::XcFunctional a = sp::make_functional({"formula:pbe"}, xs);
  const sp::XcFunctional b = sp::make_functional({"gga_x_pbe"}, xs);
  sp::XcPointData p;
  p.nspin = 1;
  p.rho = {0.002, 0.05, 0.7, 9.0};
  p.sigma = {1e-6, 0.01, 0.5, 40.0};
  p.np = 4;
  sp::XcDerivatives da, db;
  a.evaluate(p, 2, da);
  b.evaluate(p, 2, db);
  for (int i = 0; i < 4; ++i) {
    EXPECT_NEAR(da.e[i], db.e[i], 1e-11 * std::abs(db.e[i]));
    EXPECT_NEAR(da.vrho[i], db.vrho[i], 1e-10 * std::abs(db.vrho[i]));
    EXPECT_NEAR(da.vsigma[i], db.vsigma[i], 1e-9 * std::abs(db.vsigma[i]));
    EXPECT_NEAR(da.v2sigma2[i], db.v2sigma2[i], 1e-8 * std::abs(db.v2sigma2[i]));
  }
}

TEST(Formula, SyntaxErrorsNameLineAndColumn) {
  try {
    sp::compile_formula(formula("bad", "-a * rs / (1 + b * rs", {"a", "b"}, {1, 2}));
    FAIL() << "no error";
  } catch (const sp::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("input.toml:12"), std::string::npos) << e.what();
    EXPECT_NE(std::string(e.what()).find("missing ')'"), std::string::npos) << e.what();
  }
  try {
    sp::compile_formula(formula("bad", "-a * rss", {"a"}, {1}));
    FAIL() << "no error";
  } catch (const sp::InputError& e) {
    EXPECT_NE(std::string(e.what()).find("column 6"), std::string::npos) << e.what();
    EXPECT_NE(std::string(e.what()).find("did you mean 'rs'"), std::string::npos) << e.what();
  }
  EXPECT_THROW(sp::compile_formula(formula("bad", "a +", {"a"}, {1})), sp::InputError);
  EXPECT_THROW(sp::compile_formula(formula("bad", "exp n", {}, {})), sp::InputError);
  EXPECT_THROW(sp::compile_formula(formula("bad", "2 ** n", {}, {})), sp::InputError);
}

TEST(Formula, GradientThroughScfMatchesFiniteDifferences) {
  // A 1D correlation of our own rational form written as a formula, on a 1D two-electron
  // atom, and a formula exchange scaling on an atom; parameters differentiated exactly.
  for (int geometry = 0; geometry < 2; ++geometry) {
    sp::SystemSpec s;
    if (geometry == 0) {
      s.geometry = sp::Geometry::Line;
      s.line.nuclei = {{2.0, 0.0, 1.0}};
      s.grid = sp::grid_preset(sp::Geometry::Line, "default");
      s.grid.half_width = 20;
      s.xc = {"lda_x_1d_soft", "formula:c1d"};
      s.formulas = {formula("c1d", "-a*rs/(1 + b*rs + c*rs^2)", {"a", "b", "c"}, {0.03, 0.2, 0.05})};
    } else {
      s.geometry = sp::Geometry::Radial;
      s.atom.Z = 4;
      s.atom.configuration = sp::parse_configuration(sp::default_configuration(4, 0));
      s.grid = sp::grid_preset(sp::Geometry::Radial, "default");
      s.spin_polarized = true;
      s.xc = {"formula:xa", "lda_c_pw"};
      s.formulas = {formula("xa", "-1.5*alpha*0.75*(3/pi)^(1/3) * n^(1/3) * ((1+zeta)^(4/3) + (1-zeta)^(4/3))/2 * (1 + g*s2/(1 + s2))",
                            {"alpha", "g"}, {0.7, 0.1})};
    }
    std::vector<sp::ParameterRef> params;
    const int term = geometry == 0 ? 1 : 0;
    const std::vector<std::string> names = s.formulas[0].parameter_names;
    for (int k = 0; k < static_cast<int>(names.size()); ++k) {
      sp::ParameterRef r;
      r.kind = sp::ParameterRef::Kind::XcParameter;
      r.index = term;
      r.sub = k;
      r.name = names[k];
      params.push_back(r);
    }
    sp::LossTerm e, h;
    e.kind = sp::LossTerm::Kind::Energy;
    e.target = geometry == 0 ? -2.3 : -14.7;
    h.kind = sp::LossTerm::Kind::Eigenvalue;
    h.state = "homo";
    h.target = -0.5;
    sp::GradientOptions o;
    o.scf.potential_tolerance = 1e-12;
    sp::GradientProblem G({s}, params, {e, h}, o);
    const Eigen::VectorXd th = G.initial_values();
    const auto r = G.evaluate(th);
    sp::ScfOptions tight;
    tight.potential_tolerance = 1e-12;
    tight.energy_tolerance = 1e-13;
    tight.eigenvalue_tolerance = 1e-12;
    const Eigen::VectorXd fd = G.finite_difference_gradient(th, sp::default_fd_steps(params, th, 1e-3), tight);
    for (int k = 0; k < th.size(); ++k) EXPECT_NEAR(r.gradient(k), fd(k), 1e-6 * std::max(1e-3, std::abs(fd(k)))) << names[k];
  }
}
