// User formulas: parsed once, evaluated with exact jet derivatives. Checked against libxc's
// implementations of the same published forms (Dirac exchange; PBE exchange, Perdew, Burke,
// Ernzerhof PRL 77, 3865 (1996)), and through the SCF against finite differences.
#include <gtest/gtest.h>

#include <cmath>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/response/converged_state.hpp"
#include "stillpoint/xc/formula.hpp"
#include "stillpoint/response/gradient.hpp"
#include "stillpoint/ks/grid_presets.hpp"

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

namespace {

// Energy per volume and its first two density derivatives of a formula at one unpolarized
// LDA point.
sp::XcDerivatives at_point(const sp::FormulaSpec& f, double n) {
  sp::XcSettings xs;
  xs.formulas.push_back(sp::compile_formula(f));
  const sp::XcFunctional a = sp::make_functional({"formula:" + f.name}, xs);
  sp::XcPointData p;
  p.nspin = 1;
  p.rho = {n};
  p.np = 1;
  sp::XcDerivatives d;
  a.evaluate(p, 2, d);
  return d;
}

std::string repeat(const std::string& s, int k) {
  std::string r;
  r.reserve(s.size() * static_cast<std::size_t>(k));
  for (int i = 0; i < k; ++i) r += s;
  return r;
}

}  // namespace

TEST(Formula, LongFlatSumIsAccepted) {
  // 5000 summed terms (about 25 KB): eps = 5000 n, so e = 5000 n^2 (exact arithmetic).
  std::string e = "n";
  e += repeat(" + n", 4999);
  ASSERT_GT(e.size(), 19000u);
  const auto d = at_point(formula("sum", e), 0.3);
  EXPECT_NEAR(d.e[0], 5000 * 0.09, 1e-9);
  EXPECT_NEAR(d.vrho[0], 2 * 5000 * 0.3, 1e-9);
  EXPECT_NEAR(d.v2rho2[0], 2 * 5000, 1e-9);
}

TEST(Formula, DeepParenthesesAndSignChainsAreAccepted) {
  const int k = 100000;
  const auto d = at_point(formula("paren", repeat("(", k) + "n" + repeat(")", k)), 0.5);
  EXPECT_DOUBLE_EQ(d.e[0], 0.25);
  // An odd number of prefix minus signs negates.
  const auto m = at_point(formula("minus", repeat("-", k + 1) + "n"), 0.5);
  EXPECT_DOUBLE_EQ(m.e[0], -0.25);
  const auto p = at_point(formula("plus", repeat("+-", k) + "n"), 0.5);
  EXPECT_DOUBLE_EQ(p.e[0], 0.25);
}

TEST(Formula, DeepRightNestedChainsAreRefusedWithTheKey) {
  for (const std::string& e : {repeat("n^", 100000) + "n", repeat("n*(", 5000) + "n" + repeat(")", 5000)}) {
    try {
      sp::compile_formula(formula("deep", e));
      FAIL() << "no error";
    } catch (const sp::InputError& err) {
      const std::string w = err.what();
      EXPECT_NE(w.find("formula.deep.expression"), std::string::npos) << w.substr(0, 300);
      EXPECT_NE(w.find("1000 unfinished operands"), std::string::npos) << w.substr(0, 300);
      EXPECT_LT(w.size(), 600u) << "the message must not echo a huge expression";
    }
  }
  // A chain of 900 still fits.
  EXPECT_NO_THROW(sp::compile_formula(formula("ok", repeat("1^", 900) + "n")));
}

TEST(Formula, PrecedenceAndAssociativity) {
  // Conventional rules (from memory): ^ right-associative and tighter than prefix minus;
  // - and / left-associative.
  const std::vector<std::pair<std::string, double>> cases = {
      {"-2^2", -4},        {"2^-3", 0.125},        {"2^3^2", 512},     {"-2^-2", -0.25}, {"10-4-3", 3},
      {"64/4/2", 8},       {"2*-3", -6},           {"-3*2+1", -5},     {"(1+2)*3", 9},   {"2^-3^2", std::pow(2.0, -9.0)},
      {"pow(2, 3)", 8},    {"max(1, 2) + min(1, 2)", 3}, {"max(-1, -(2))", -1}, {"exp(0)*cbrt(8)", 2}, {"2^0.5", std::sqrt(2.0)}};
  for (const auto& [e, v] : cases) {
    // per_volume = false: e = n * value; at n = 1 the energy density is the value.
    const auto d = at_point(formula("p", e), 1.0);
    EXPECT_NEAR(d.e[0], v, 1e-14 * std::abs(v)) << e;
  }
  EXPECT_THROW(sp::compile_formula(formula("bad", "max(n)")), sp::InputError);
  EXPECT_THROW(sp::compile_formula(formula("bad", "exp(n, n)")), sp::InputError);
  EXPECT_THROW(sp::compile_formula(formula("bad", "(n, n)")), sp::InputError);
  EXPECT_THROW(sp::compile_formula(formula("bad", "n)")), sp::InputError);
  EXPECT_THROW(sp::compile_formula(formula("bad", "()")), sp::InputError);
  EXPECT_THROW(sp::compile_formula(formula("bad", "max(n,")), sp::InputError);
  EXPECT_THROW(sp::compile_formula(formula("bad", "1e999*n")), sp::InputError);
}

TEST(Formula, MaxAndMinCarryTheDerivativesOfTheSelectedBranch) {
  // eps = max(n^2, 0.25): e = n^3 above n = 0.5, 0.25 n below (exact calculus).
  const auto hi = at_point(formula("g", "max(n^2, 0.25)"), 0.8);
  EXPECT_NEAR(hi.e[0], 0.512, 1e-15);
  EXPECT_NEAR(hi.vrho[0], 3 * 0.64, 1e-14);
  EXPECT_NEAR(hi.v2rho2[0], 6 * 0.8, 1e-14);
  const auto lo = at_point(formula("g", "max(n^2, 0.25)"), 0.3);
  EXPECT_NEAR(lo.e[0], 0.075, 1e-15);
  EXPECT_NEAR(lo.vrho[0], 0.25, 1e-15);
  EXPECT_NEAR(lo.v2rho2[0], 0.0, 1e-15);
  const auto mn = at_point(formula("g", "min(n^2, 0.25)"), 0.3);
  EXPECT_NEAR(mn.vrho[0], 3 * 0.09, 1e-15);
}

TEST(Formula, NonFiniteValuesAreErrorsNamingFormulaPointAndVariables) {
  // Each is undefined somewhere on a 1D two-electron atom's density; the last only where n < 0.1
  // (the density of this atom spans 0 .. about 0.5 per bohr).
  const std::vector<sp::FormulaSpec> bad = {formula("b1", "a/(n-n)", {"a"}, {1.0}), formula("b2", "log(n-1)"),
                                             formula("b3", "sqrt(-a)", {"a"}, {1.0}),
                                             formula("b4", "-0.05*sqrt(n - 0.1)")};
  for (const auto& f : bad) {
    sp::SystemSpec s;
    s.geometry = sp::Geometry::Line;
    s.line.nuclei = {{2.0, 0.0, 1.0}};
    s.grid = sp::grid_preset(sp::Geometry::Line, "coarse");
    s.xc = {"lda_x_1d_soft", "formula:" + f.name};
    s.formulas = {f};
    try {
      sp::ConvergedState st(s);
      FAIL() << f.expression << ": no error";
    } catch (const sp::NumericalError& e) {
      const std::string w = e.what();
      EXPECT_NE(w.find("formula:" + f.name), std::string::npos) << w;
      EXPECT_NE(w.find(" at x = "), std::string::npos) << w;
      EXPECT_NE(w.find(" bohr"), std::string::npos) << w;
      EXPECT_NE(w.find("where n = "), std::string::npos) << w;
      EXPECT_NE(w.find("rs = "), std::string::npos) << w;
    }
  }
  // The guarded form of the last one solves.
  sp::SystemSpec s;
  s.geometry = sp::Geometry::Line;
  s.line.nuclei = {{2.0, 0.0, 1.0}};
  s.grid = sp::grid_preset(sp::Geometry::Line, "coarse");
  s.xc = {"lda_x_1d_soft", "formula:g"};
  s.formulas = {formula("g", "-0.05*sqrt(max(n - 0.1, 1e-12))")};
  EXPECT_NO_THROW(sp::ConvergedState st(s));
}
