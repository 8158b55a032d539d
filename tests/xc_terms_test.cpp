// The exchange-correlation energy split into the terms of the functional (xc_terms.hpp) and
// how `solve` reports it.
#include <gtest/gtest.h>

#include <cmath>
#include <nlohmann/json.hpp>

#include "cli_support.hpp"
#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/problem.hpp"
#include "stillpoint/xc/on_mesh.hpp"
#include "stillpoint/ks/xc_terms.hpp"

namespace sp = stillpoint;

TEST(XcTerms, HydrogenDensityLdaExchangeIsAnalytic) {
  // n = e^(−2r)/π (hydrogen 1s). Unpolarized LDA exchange, textbook closed form:
  // E_x = −(3/4)(3/π)^(1/3) ∫ n^(4/3) d³r = −(3/4)(3/π)^(1/3) π^(−4/3) 4π · 2/(8/3)³
  //     = −0.2127 Ha (the integral is elementary; the value from memory as a cross-check).
  sp::SystemSpec s;
  s.name = "H";
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = 1;
  s.atom.configuration = sp::parse_configuration("1s1");
  s.grid = sp::grid_preset(sp::Geometry::Radial, "default");
  s.xc = {"0.5*lda_x", "lda_c_pw", "0.5*lda_x"};
  const sp::KsProblem P(s);
  const Eigen::VectorXd r = P.mesh().x();
  const Eigen::VectorXd n = (-2.0 * r.array()).exp() / M_PI;
  const std::vector<sp::XcTermEnergy> terms = sp::xc_term_energies(P, {n});
  ASSERT_EQ(terms.size(), 3u);
  const double exact_x = -0.75 * std::cbrt(3.0 / M_PI) * std::pow(M_PI, -4.0 / 3.0) * 4.0 * M_PI * 2.0 * 27.0 / 512.0;
  EXPECT_NEAR(exact_x, -0.2127, 1e-4);
  EXPECT_EQ(terms[0].name, "lda_x");
  EXPECT_EQ(terms[0].kind, "exchange");
  EXPECT_EQ(terms[0].weight, 0.5);
  EXPECT_NEAR(terms[0].energy + terms[2].energy, exact_x, 1e-8);
  EXPECT_EQ(terms[1].kind, "correlation");
  EXPECT_LT(terms[1].energy, 0.0);
  // The terms add up to the whole functional's energy.
  const double whole = sp::xc_energy(P.mesh(), P.xc(), {n}, P.density_threshold());
  EXPECT_NEAR(terms[0].energy + terms[1].energy + terms[2].energy, whole, 1e-13);
  EXPECT_EQ(sp::xc_list_form(P.xc()), "[\"0.5*lda_x\", \"lda_c_pw\", \"0.5*lda_x\"]");
}

TEST(XcTerms, SolveReportsEachTermAndNamesWhatIsThere) {
  clitest::Scratch dir;
  dir.write("in.toml", R"(
[[system]]
name = "free"
kind = "line"
interacting = false
[[system.nucleus]]
charge = 1.0
[[system]]
name = "he"
kind = "line"
xc = "lda_x_1d_soft + model:rational_c_1d"
[[system.nucleus]]
charge = 2.0
)");
  const clitest::CliRun r = dir.cli("solve in.toml --output out");
  ASSERT_EQ(r.rc, 0) << r.err;
  EXPECT_NE(r.out.find("line, 1 nucleus, 1 electron, spin-unpolarized, non-interacting"), std::string::npos) << r.out;
  EXPECT_NE(r.out.find("functional  none (non-interacting: no Hartree or exchange-correlation term)"), std::string::npos)
      << r.out;
  EXPECT_NE(r.out.find("functional  [\"lda_x_1d_soft\", \"model:rational_c_1d\"]"), std::string::npos) << r.out;
  EXPECT_NE(r.out.find("(correlation)"), std::string::npos) << r.out;
  const auto j = nlohmann::json::parse(dir.read("out/he.json"));
  ASSERT_EQ(j["xc_terms"].size(), 2u);
  EXPECT_EQ(j["xc_terms"][0]["kind"], "exchange");
  EXPECT_EQ(j["xc_terms"][1]["kind"], "correlation");
  const double ex = j["energy"]["exchange"], ec = j["energy"]["correlation"], exc = j["energy"]["xc"];
  EXPECT_LT(ex, 0.0);
  EXPECT_LT(ec, 0.0);
  EXPECT_NEAR(ex + ec, exc, 1e-12);
  const auto f = nlohmann::json::parse(dir.read("out/free.json"));
  EXPECT_TRUE(f["xc_terms"].empty());
}
