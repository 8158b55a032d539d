// `stillpoint grad` end to end: verification against central finite differences of the whole
// converged program (docs/theory.md §6.5), tangent and adjoint agreement, outputs and bad input.
#include <gtest/gtest.h>

#include <nlohmann/json.hpp>

#include <array>
#include <cstdio>
#include <sstream>

#include "cli_support.hpp"
#include "stillpoint/response/gradient.hpp"
#include "stillpoint/response/input.hpp"

using clitest::Scratch;

namespace sp = stillpoint;

namespace {

const char* kSystem = R"(
[scf]
potential_tolerance = 1e-11

[[system]]
name = "A"
kind = "line"
xc = ["lda_x_1d_soft", "model:rational_c_1d"]
grid = { preset = "default", half_width = 16.0 }
[[system.nucleus]]
charge = 2.0
position = 0.0
softening = 1.0
[[system.potential]]
kind = "harmonic"
omega = 0.1
center = 0.3
)";

}  // namespace

TEST(CliGrad, VerifyPassesAndModesAgree) {
  Scratch s;
  const std::string body = std::string(kSystem) + R"(
[[parameter]]
kind = "xc_weight"
term = 0
[[parameter]]
kind = "xc_parameter"
term = "model:rational_c_1d"
fields = ["a1", "b2"]
[[parameter]]
kind = "harmonic"
index = 0
[[loss]]
kind = "eigenvalue"
state = "homo"
target = -0.8
[[loss]]
kind = "energy"
)";
  s.write("g.toml", body);
  const auto a = s.cli("grad g.toml --verify --output outa");
  ASSERT_EQ(a.rc, 0) << a.out << a.err;
  EXPECT_NE(a.out.find("verify: PASS"), std::string::npos) << a.out;
  const auto t = s.cli("grad g.toml --mode tangent --output outt");
  ASSERT_EQ(t.rc, 0) << t.err;
  const auto ja = nlohmann::json::parse(s.read("outa/grad.json")), jt = nlohmann::json::parse(s.read("outt/grad.json"));
  EXPECT_EQ(ja["units"]["energy"], "hartree");
  // Every linear solve met the Krylov tolerance (the floor was not needed here).
  for (const auto* j : {&ja, &jt}) {
    EXPECT_GT((*j)["linear_solves"].get<int>(), 0);
    EXPECT_LE((*j)["max_linear_residual"].get<double>(), (*j)["krylov_tolerance"].get<double>());
  }
  ASSERT_EQ(ja["parameters"].size(), 5u);  // weight, a1, b2, omega, center
  for (std::size_t i = 0; i < ja["parameters"].size(); ++i) {
    const double ga = ja["parameters"][i]["gradient"], gt = jt["parameters"][i]["gradient"];
    EXPECT_NEAR(ga, gt, 1e-10 * std::max(1e-2, std::abs(ga))) << ja["parameters"][i]["name"];
    const double fd = ja["parameters"][i]["finite_difference"];
    EXPECT_NEAR(ga, fd, 1e-6 * std::max(1e-3, std::abs(fd)));
  }
}

TEST(CliGrad, GridPotentialWritesGradientField) {
  Scratch s;
  s.write("ref.csv", "x,n\n-16,0\n-1,0.4\n0,0.9\n1,0.4\n16,0\n");
  s.write("g.toml", std::string(kSystem) + R"(
[[parameter]]
kind = "grid_potential"
[[loss]]
kind = "density"
reference = "ref.csv"
)");
  const auto r = s.cli("grad g.toml --output out");
  ASSERT_EQ(r.rc, 0) << r.err;
  const std::string csv = s.read("out/A_potential_gradient.csv");
  EXPECT_NE(csv.find("x_bohr,dloss_dv_per_hartree"), std::string::npos);
  // Rows in parameter order: x, dL/dv_k, W_k.
  std::vector<std::array<double, 3>> rows;
  {
    std::istringstream in(csv);
    std::string line;
    while (std::getline(in, line)) {
      if (line.empty() || line[0] == '#' || line[0] == 'x') continue;
      std::array<double, 3> v{};
      ASSERT_EQ(std::sscanf(line.c_str(), "%lf,%lf,%lf", &v[0], &v[1], &v[2]), 3) << line;
      rows.push_back(v);
    }
  }
  // Central differences of the whole program (an SCF per point, tight tolerances) at nodes near
  // the centre, the flank and the tail of the density.
  const sp::GradInput in = sp::read_grad_input((s.dir() / "g.toml").string());
  ASSERT_EQ(rows.size(), in.parameters.size());
  sp::GradientProblem problem(in.base.systems, in.parameters, in.loss, in.options);
  const Eigen::VectorXd theta = problem.initial_values();
  sp::ScfOptions tight = in.base.scf;
  tight.potential_tolerance = 1e-12;
  tight.energy_tolerance = 1e-13;
  tight.eigenvalue_tolerance = 1e-12;
  int checked = 0;
  for (double target : {0.0, -1.5, 4.0}) {
    std::size_t p = 0;
    for (std::size_t i = 1; i < rows.size(); ++i)
      if (std::abs(rows[i][0] - target) < std::abs(rows[p][0] - target)) p = i;
    const double h = 1e-4;
    Eigen::VectorXd a = theta, b = theta;
    a(p) += h;
    b(p) -= h;
    const double fd = (problem.loss(a, &tight) - problem.loss(b, &tight)) / (2.0 * h);
    EXPECT_NEAR(rows[p][1], fd, 1e-6 * std::abs(fd) + 1e-9) << "node at x = " << rows[p][0];
    ++checked;
  }
  EXPECT_EQ(checked, 3);
}

TEST(CliGrad, BadInputIsReportedWithLineAndKey) {
  Scratch s;
  s.write("a.toml", std::string(kSystem) + "[[parameter]]\nkind = \"gausian\"\n[[loss]]\nkind = \"energy\"\n");
  auto r = s.cli("grad a.toml --output out");
  EXPECT_EQ(r.rc, 2);
  EXPECT_NE(r.err.find("a.toml:"), std::string::npos) << r.err;
  EXPECT_NE(r.err.find("parameter[0].kind"), std::string::npos) << r.err;
  EXPECT_TRUE(s.absent_or_empty("out"));
  s.write("b.toml", std::string(kSystem) +
                        "[[parameter]]\nkind = \"xc_weight\"\nterm = 0\n[[loss]]\nkind = \"energy_difference\"\nsystem = \"A\"\nminus = \"B\"\n");
  r = s.cli("grad b.toml");
  EXPECT_EQ(r.rc, 2);
  EXPECT_NE(r.err.find("no system named 'B'"), std::string::npos) << r.err;
  s.write("c.toml", std::string(kSystem) + "[[parameter]]\nkind = \"xc_parameter\"\nterm = \"model:rational_c_1d\"\nfields = [\"a9\"]\n[[loss]]\nkind = \"energy\"\n");
  r = s.cli("grad c.toml");
  EXPECT_EQ(r.rc, 2);
  EXPECT_NE(r.err.find("not a parameter"), std::string::npos) << r.err;
}

TEST(CliGrad, AcceptsAFitWorkflowAsItIs) {
  // The workflow a user is about to fit, verified as it is: [fit] and [[dataset]] are expanded
  // or ignored with a note, not refused as unknown keys.
  Scratch s;
  const auto r = s.cli("grad " + std::string(STILLPOINT_SOURCE_DIR) + "/workflows/fit-1d-formula.toml --verify --output out");
  ASSERT_EQ(r.rc, 0) << r.err;
  EXPECT_NE(r.out.find("verify: PASS"), std::string::npos) << r.out;
  EXPECT_NE(r.err.find("is a fit workflow: [fit] and the fit-only keys"), std::string::npos) << r.err;
}

TEST(CliGrad, SolveDensityOfAnAtomIsAReferenceWithoutWarnings) {
  // solve writes an atom's density from the first node after r = 0, with its position rounded
  // to 13 digits: read back on the same grid it covers every weighted node.
  Scratch s;
  s.write("he.toml", R"(
[[system]]
name = "He"
kind = "atom"
element = "He"
xc = ["lda_x", "lda_c_pw"]
)");
  const auto solved = s.cli("solve he.toml --output out");
  ASSERT_EQ(solved.rc, 0) << solved.err;
  s.write("g.toml", R"(
[[system]]
name = "He"
kind = "atom"
element = "He"
xc = ["lda_x", "lda_c_pw"]
[[parameter]]
kind = "xc_weight"
term = 1
[[loss]]
kind = "density"
reference = "out/He_density.csv"
)");
  const auto r = s.cli("grad g.toml --output gout");
  ASSERT_EQ(r.rc, 0) << r.err;
  EXPECT_EQ(r.err.find("does not cover"), std::string::npos) << r.err;
  // The density it reproduces is its own: the loss is zero up to rounding.
  const auto j = nlohmann::json::parse(s.read("gout/grad.json"));
  EXPECT_LT(std::abs(j["loss"].get<double>()), 1e-20) << j.dump(1);
}
