// `fit`: optimizers, reproducibility, checkpoints and workflow files.
//
// External sources of the checks (named beside each test):
//  - parameter recovery: references computed by the program itself with known parameters,
//    then fitted back from a perturbed start (a manufactured-solution test: the exact answer
//    is known by construction, no outside value needed);
//  - K. Schwarz, Phys. Rev. B 5, 2466 (1972): alpha_HF per atom such that the self-consistent
//    X-alpha energy equals the Hartree–Fock energy; values and HF targets from
//    basis-data/reference/check-values.md §4g, label [recalled+computed]: the table values are
//    recalled from the paper and were recomputed independently with a separate radial solver
//    (HF energies: Clementi & Roetti, At. Data Nucl. Data Tables 14, 177 (1974), §4f).
#include <gtest/gtest.h>

#include <signal.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cmath>
#include <filesystem>

#include <nlohmann/json.hpp>

#include "cli_support.hpp"
#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/fit/fit.hpp"
#include "stillpoint/fit/input.hpp"
#include "stillpoint/response/gradient.hpp"
#include "stillpoint/ks/grid_presets.hpp"

namespace sp = stillpoint;

namespace {

sp::ParameterRef xc_param(int term, int sub, const std::string& field, const std::string& name) {
  sp::ParameterRef r;
  r.kind = sp::ParameterRef::Kind::XcParameter;
  r.index = term;
  r.sub = sub;
  r.field = field;
  r.name = name;
  return r;
}

// Our own 1D scenario: soft-Coulomb "atoms" and a "molecule", 1D exchange plus the rational
// correlation model with parameters (a1, a2, b1, b2, b3).
sp::SystemSpec line(const std::string& name, std::vector<sp::Nucleus1d> nuclei, double charge, bool polarized,
                    const std::vector<double>& c_params) {
  sp::SystemSpec s;
  s.name = name;
  s.geometry = sp::Geometry::Line;
  s.line.nuclei = std::move(nuclei);
  s.charge = charge;
  s.spin_polarized = polarized;
  s.xc = {"lda_x_1d_soft", "model:rational_c_1d"};
  s.xc_parameters = {{}, c_params};
  s.grid = sp::grid_preset(sp::Geometry::Line, "default");
  s.grid.half_width = 16.0;
  return s;
}

const std::vector<double> kTrueC{0.045, 0.0, 0.0, 0.08, 0.0};
const std::vector<double> kStartC{0.030, 0.0, 0.0, 0.05, 0.0};

std::vector<sp::SystemSpec> line_systems(const std::vector<double>& c) {
  return {line("He", {{2.0, 0.0, 1.0}}, 0.0, false, c), line("H2", {{1.0, -0.8, 1.0}, {1.0, 0.8, 1.0}}, 0.0, false, c),
          line("Li", {{3.0, 0.0, 1.0}}, 0.0, true, c)};
}

sp::ScfOptions scf() {
  sp::ScfOptions o;
  o.potential_tolerance = 1e-11;
  o.energy_tolerance = 1e-12;
  o.eigenvalue_tolerance = 1e-11;
  return o;
}

struct Reference {
  std::vector<double> energy;
  std::vector<std::vector<double>> density;
};

Reference solve_references(const std::vector<sp::SystemSpec>& systems) {
  Reference r;
  for (const auto& s : systems) {
    sp::KsProblem P(s);
    const auto S = sp::solve_scf(P, scf());
    r.energy.push_back(S.energy.total);
    const Eigen::VectorXd n = S.total_density();
    r.density.emplace_back(n.data(), n.data() + n.size());
  }
  return r;
}

sp::LossTerm energy_term(int system, double target, double weight) {
  sp::LossTerm t;
  t.kind = sp::LossTerm::Kind::Energy;
  t.system = system;
  t.target = target;
  t.weight = weight;
  t.name = "energy:" + std::to_string(system);
  return t;
}

sp::LossTerm density_term(int system, const std::vector<double>& ref, double weight) {
  sp::LossTerm t;
  t.kind = sp::LossTerm::Kind::Density;
  t.system = system;
  t.reference = ref;
  t.weight = weight;
  t.name = "density:" + std::to_string(system);
  return t;
}

// Recovery spec: energies of all three (1 mHa scale) and the He and Li densities.
sp::FitSpec line_recovery_spec(sp::FitOptions::Optimizer opt) {
  static const Reference ref = solve_references(line_systems(kTrueC));
  sp::FitSpec f;
  f.systems = line_systems(kStartC);
  f.parameters = {xc_param(1, 0, "a1", "c.a1"), xc_param(1, 3, "b2", "c.b2")};
  f.info.resize(2);
  for (auto& i : f.info) i.scale = 0.1;
  for (int s = 0; s < 3; ++s) f.training.push_back(energy_term(s, ref.energy[s], 1e6));
  f.training.push_back(density_term(0, ref.density[0], 1e4));
  f.training.push_back(density_term(2, ref.density[2], 1e4));
  f.gradient.scf = scf();
  f.options.optimizer = opt;
  f.options.max_iterations = 60;
  f.options.gradient_tolerance = 1e-14;
  f.options.step_tolerance = 1e-14;
  f.options.loss_tolerance = 1e-16;
  return f;
}

// Relative recovery tolerance of the issue: 1e-6. The SCF tolerance (1e-11 hartree in the
// potential) limits the attainable accuracy to about 1e-8 here, so 1e-6 has margin.
constexpr double kRecovery = 1e-6;

}  // namespace

TEST(FitRecovery, LineLbfgs) {
  const auto res = sp::run_fit(line_recovery_spec(sp::FitOptions::Optimizer::Lbfgs));
  SCOPED_TRACE(res.message);
  EXPECT_NEAR(res.fitted(0), kTrueC[0], kRecovery * kTrueC[0]);
  EXPECT_NEAR(res.fitted(1), kTrueC[3], kRecovery * kTrueC[3]);
  std::printf("L-BFGS: %zu iterations, %d evaluations, loss %.3e -> %.3e, %s\n", res.history.size(), res.evaluations,
              res.before.training_loss, res.after.training_loss, res.message.c_str());
}

TEST(FitRecovery, LineLevenbergMarquardt) {
  const auto res = sp::run_fit(line_recovery_spec(sp::FitOptions::Optimizer::LevenbergMarquardt));
  SCOPED_TRACE(res.message);
  EXPECT_NEAR(res.fitted(0), kTrueC[0], kRecovery * kTrueC[0]);
  EXPECT_NEAR(res.fitted(1), kTrueC[3], kRecovery * kTrueC[3]);
  std::printf("LM: %zu iterations, %d evaluations, loss %.3e -> %.3e, %s\n", res.history.size(), res.evaluations,
              res.before.training_loss, res.after.training_loss, res.message.c_str());
}

namespace {

sp::SystemSpec atom(const std::string& symbol, bool polarized, std::vector<std::string> xc) {
  sp::SystemSpec s;
  s.name = symbol;
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = sp::atomic_number(symbol);
  s.atom.configuration = sp::parse_configuration(sp::default_configuration(s.atom.Z, 0));
  s.spin_polarized = polarized;
  s.xc = std::move(xc);
  s.grid = sp::grid_preset(sp::Geometry::Radial, "default");
  return s;
}

}  // namespace

// Manufactured references: PBE-form exchange with the published (kappa, mu) = (0.804,
// 0.2195149727645171) (Perdew, Burke, Ernzerhof, PRL 77, 3865 (1996)) plus PW92 correlation,
// energies of He, Be, Ne and the Ne density; fitted back from (0.70, 0.25).
sp::FitSpec atom_recovery_spec(sp::FitOptions::Optimizer opt) {
  const std::vector<double> truth{0.804, 0.2195149727645171};
  std::vector<sp::SystemSpec> sys;
  for (const char* el : {"He", "Be", "Ne"}) {
    sys.push_back(atom(el, false, {"model:pbe_x", "lda_c_pw"}));
    sys.back().xc_parameters = {truth, {}};
  }
  const Reference ref = solve_references(sys);
  for (auto& s : sys) s.xc_parameters = {{0.70, 0.25}, {}};
  sp::FitSpec f;
  f.systems = sys;
  f.parameters = {xc_param(0, 0, "kappa", "x.kappa"), xc_param(0, 1, "mu", "x.mu")};
  f.parameters[0].lower = 0.1;
  f.parameters[0].upper = 2.0;
  f.parameters[1].lower = 0.0;
  f.info.resize(2);
  for (auto& i : f.info) i.scale = 0.2;
  for (int s = 0; s < 3; ++s) f.training.push_back(energy_term(s, ref.energy[s], 1e6));
  f.training.push_back(density_term(2, ref.density[2], 1e2));
  f.gradient.scf = scf();
  f.options.optimizer = opt;
  f.options.max_iterations = 80;
  f.options.gradient_tolerance = 1e-14;
  f.options.step_tolerance = 1e-14;
  f.options.loss_tolerance = 1e-16;
  return f;
}

TEST(FitRecovery, AtomLbfgs) {
  const auto res = sp::run_fit(atom_recovery_spec(sp::FitOptions::Optimizer::Lbfgs));
  SCOPED_TRACE(res.message);
  EXPECT_NEAR(res.fitted(0), 0.804, kRecovery * 0.804);
  EXPECT_NEAR(res.fitted(1), 0.2195149727645171, kRecovery * 0.2195149727645171);
  std::printf("atoms L-BFGS: %zu iterations, %d evaluations, loss %.3e -> %.3e, %s\n", res.history.size(),
              res.evaluations, res.before.training_loss, res.after.training_loss, res.message.c_str());
}

TEST(FitRecovery, AtomLevenbergMarquardt) {
  const auto res = sp::run_fit(atom_recovery_spec(sp::FitOptions::Optimizer::LevenbergMarquardt));
  SCOPED_TRACE(res.message);
  EXPECT_NEAR(res.fitted(0), 0.804, kRecovery * 0.804);
  EXPECT_NEAR(res.fitted(1), 0.2195149727645171, kRecovery * 0.2195149727645171);
  std::printf("atoms LM: %zu iterations, %d evaluations, loss %.3e -> %.3e, %s\n", res.history.size(), res.evaluations,
              res.before.training_loss, res.after.training_loss, res.message.c_str());
}

// Schwarz (1972): alpha_HF per atom (check-values.md §4g [recalled+computed]; HF energies
// Clementi & Roetti 1974 via §4f). H spin-polarized, the others closed shells; X-alpha
// exchange only, no correlation.
TEST(FitSchwarz, XalphaReproducesPublishedAlphaHF) {
  struct Row {
    const char* el;
    bool pol;
    double e_hf, alpha;
  };
  // He, Be, Ne: Schwarz's published alpha_HF [recalled+computed]; H: the value recomputed by
  // an independent fit (check-values §4g: the recalled paper value was wrong), so not the paper's.
  const std::vector<Row> rows{{"H", true, -0.5, 0.77679}, {"He", false, -2.8616800, 0.77298},
                              {"Be", false, -14.573023, 0.76823}, {"Ne", false, -128.547098, 0.73081}};
  sp::FitSpec f;
  for (std::size_t i = 0; i < rows.size(); ++i) {
    f.systems.push_back(atom(rows[i].el, rows[i].pol, {"model:xalpha"}));
    sp::ParameterRef p = xc_param(0, 0, "alpha", std::string("alpha_") + rows[i].el);
    p.system = static_cast<int>(i);
    p.lower = 0.3;
    p.upper = 1.2;
    f.parameters.push_back(p);
    f.training.push_back(energy_term(static_cast<int>(i), rows[i].e_hf, 1e6));
  }
  f.info.resize(rows.size());
  f.options.optimizer = sp::FitOptions::Optimizer::LevenbergMarquardt;
  f.options.gradient_tolerance = 1e-12;
  f.options.step_tolerance = 1e-12;
  const auto res = sp::run_fit(f);
  SCOPED_TRACE(res.message);
  // Published to 5 decimals (the fit lands within 3e-6 of each); 1e-4 in alpha would be ~1.7 mHa for Ne.
  for (std::size_t i = 0; i < rows.size(); ++i) {
    EXPECT_NEAR(res.fitted(i), rows[i].alpha, 1e-5) << rows[i].el;
    std::printf("  %-2s alpha_HF fitted %.6f  published %.5f (Schwarz 1972)\n", rows[i].el, res.fitted(i), rows[i].alpha);
  }
}

namespace {

std::string scratch_file(const std::string& name) {
  const auto* info = ::testing::UnitTest::GetInstance()->current_test_info();
  return (std::filesystem::temp_directory_path() /
          ("stillpoint-fit-" + std::string(info->name()) + "-" + std::to_string(::getpid()) + "-" + name))
      .string();
}

void expect_same_run(const sp::FitResult& a, const sp::FitResult& b) {
  ASSERT_EQ(a.fitted.size(), b.fitted.size());
  for (int i = 0; i < a.fitted.size(); ++i) EXPECT_EQ(a.fitted(i), b.fitted(i)) << "parameter " << i;  // bitwise
  ASSERT_EQ(a.history.size(), b.history.size());
  for (std::size_t i = 0; i < a.history.size(); ++i) {
    EXPECT_EQ(a.history[i].loss, b.history[i].loss) << "iteration " << i;
    EXPECT_EQ(a.history[i].gradient_norm, b.history[i].gradient_norm) << "iteration " << i;
  }
  EXPECT_EQ(a.after.training_loss, b.after.training_loss);
}

}  // namespace

// Resume equals uninterrupted, bit for bit, for both optimizers (the run is stopped by the
// test hook after iteration 4, exactly as a signal would stop it).
TEST(FitResume, EqualsUninterrupted) {
  for (auto opt : {sp::FitOptions::Optimizer::Lbfgs, sp::FitOptions::Optimizer::LevenbergMarquardt}) {
    SCOPED_TRACE(opt == sp::FitOptions::Optimizer::Lbfgs ? "lbfgs" : "lm");
    sp::FitSpec spec = line_recovery_spec(opt);
    spec.options.checkpoint_every = 3;
    sp::FitRunOptions full;
    full.checkpoint = scratch_file("full.ckpt");
    const auto a = sp::run_fit(spec, full);
    sp::FitRunOptions part;
    part.checkpoint = scratch_file("part.ckpt");
    part.stop_after_iterations = 4;
    const auto b = sp::run_fit(spec, part);
    EXPECT_EQ(b.termination, sp::FitResult::Termination::Interrupted);
    ASSERT_TRUE(std::filesystem::exists(part.checkpoint));
    sp::FitRunOptions cont;
    cont.checkpoint = part.checkpoint;
    cont.resume = true;
    const auto c = sp::run_fit(spec, cont);
    EXPECT_GT(c.replayed_evaluations, 0);
    EXPECT_LT(c.evaluations, a.evaluations);  // nothing recomputed before the interruption point
    expect_same_run(a, c);
    // Resuming the finished fit replays it and re-evaluates the optimum from the same warm
    // starts: loss and standard errors are bit for bit those of the uninterrupted run.
    sp::FitRunOptions again;
    again.checkpoint = full.checkpoint;
    again.resume = true;
    const auto d = sp::run_fit(spec, again);
    expect_same_run(a, d);
    EXPECT_EQ(a.uncertainty.computed, d.uncertainty.computed);
    ASSERT_EQ(a.uncertainty.standard_error.size(), d.uncertainty.standard_error.size());
    for (int i = 0; i < a.uncertainty.standard_error.size(); ++i)
      EXPECT_EQ(a.uncertainty.standard_error(i), d.uncertainty.standard_error(i)) << "parameter " << i;  // bitwise
    EXPECT_EQ(a.uncertainty.residual_variance, d.uncertainty.residual_variance);
    // A changed workflow refuses the checkpoint.
    sp::FitSpec other = spec;
    other.training[0].weight *= 2;
    EXPECT_THROW(sp::run_fit(other, cont), sp::InputError);
    std::filesystem::remove(full.checkpoint);
    std::filesystem::remove(part.checkpoint);
  }
}

// Results do not depend on the number of threads.
TEST(FitThreads, IdenticalForOneAndTwoThreads) {
  sp::FitSpec one = line_recovery_spec(sp::FitOptions::Optimizer::Lbfgs);
  one.options.max_iterations = 8;
  sp::FitSpec two = one;
  two.options.threads = 2;
  expect_same_run(sp::run_fit(one), sp::run_fit(two));
}

// Validation terms are computed at every iteration but never drive the optimizer: the same
// fit with and without them takes exactly the same path.
TEST(FitValidation, ComputedButNeverDrivesTheOptimizer) {
  sp::FitSpec plain = line_recovery_spec(sp::FitOptions::Optimizer::Lbfgs);
  plain.options.max_iterations = 10;
  sp::FitSpec with = plain;
  with.systems.push_back(line("Be", {{4.0, 0.0, 1.0}}, 0.0, false, kStartC));
  with.validation.push_back(energy_term(3, -6.0, 1e6));                       // Be, a made-up target
  with.validation.push_back(energy_term(0, with.training[0].target.value() + 0.01, 1e6));  // He, shifted
  const auto a = sp::run_fit(plain), b = sp::run_fit(with);
  expect_same_run(a, b);
  ASSERT_FALSE(b.history.empty());
  for (const auto& h : b.history) EXPECT_TRUE(std::isfinite(h.validation_loss)) << h.iteration;
  EXPECT_NE(b.history.front().validation_loss, b.history.back().validation_loss);
  EXPECT_TRUE(std::isfinite(b.after.validation_loss));
  EXPECT_TRUE(std::isnan(a.after.validation_loss));
}

// A trial point whose SCF fails is rejected (Ceres shrinks the step), logged with its reason,
// and the fit still reaches the answer.
TEST(FitRejection, FailedTrialPointIsRejectedAndLogged) {
  for (auto opt : {sp::FitOptions::Optimizer::Lbfgs, sp::FitOptions::Optimizer::LevenbergMarquardt}) {
    sp::FitSpec spec = line_recovery_spec(opt);
    int calls = 0;
    sp::FitRunOptions run;
    run.inject_failure = [&](const Eigen::VectorXd&) { return ++calls == 3; };
    const auto res = sp::run_fit(spec, run);
    SCOPED_TRACE(res.message);
    for (const auto& r : res.rejected) std::printf("%s\n", r.c_str());
    ASSERT_EQ(res.rejected.size(), 1u);
    EXPECT_NE(res.rejected[0].find("injected"), std::string::npos) << res.rejected[0];
    EXPECT_NEAR(res.fitted(0), kTrueC[0], kRecovery * kTrueC[0]);
    EXPECT_NEAR(res.fitted(1), kTrueC[3], kRecovery * kTrueC[3]);
  }
}

// Gauss–Newton errors: noisy manufactured data give finite errors and a symmetric
// correlation matrix with unit diagonal.
// A fit whose residuals are linear in its parameters, so that the Gauss–Newton covariance is
// the closed-form least-squares one (any regression text; common practice): two non-interacting
// harmonic traps on the line, ω_A and ω_B free, whose levels are ω (n + 1/2) and whose
// two-electron energy is ω. With one scale for every term the residuals are r = (X θ − y) / σ,
// θ̂ = (XᵀX)⁻¹ Xᵀ y and cov θ̂ = s² (XᵀX)⁻¹ with s² = RSS / (m − p).
TEST(FitUncertainty, LinearLeastSquaresMatchesClosedForm) {
  const std::string w = R"([fit]
optimizer = "levenberg_marquardt"
step_tolerance = 1e-15
gradient_tolerance = 1e-15
loss_tolerance = 1e-16
[scf]
potential_tolerance = 1e-12
[[system]]
name = "A"
kind = "line"
interacting = false
charge = -2
[[system.potential]]
kind = "harmonic"
omega = 1.0
[[system]]
name = "B"
kind = "line"
interacting = false
charge = -2
[[system.potential]]
kind = "harmonic"
omega = 1.4
[[parameter]]
kind = "harmonic"
system = "A"
fields = ["omega"]
[[parameter]]
kind = "harmonic"
system = "B"
fields = ["omega"]
[[loss]]
kind = "eigenvalue"
system = "A"
state = "1"
target = 0.52
scale = 0.01
[[loss]]
kind = "eigenvalue"
system = "A"
state = "2"
target = 1.49
scale = 0.01
[[loss]]
kind = "energy"
system = "A"
target = 1.03
scale = 0.01
[[loss]]
kind = "eigenvalue"
system = "B"
state = "1"
target = 0.71
scale = 0.01
[[loss]]
kind = "energy_difference"
system = "A"
minus = "B"
target = -0.4
scale = 0.01
)";
  const sp::FitWorkflow wf = sp::parse_fit_workflow(w, "linear.toml");
  const auto res = sp::run_fit(wf.spec);
  ASSERT_TRUE(res.uncertainty.computed) << res.uncertainty.note;
  Eigen::MatrixXd X(5, 2);
  X << 0.5, 0.0, 1.5, 0.0, 1.0, 0.0, 0.0, 0.5, 1.0, -1.0;
  Eigen::VectorXd y(5);
  y << 0.52, 1.49, 1.03, 0.71, -0.4;
  const Eigen::MatrixXd XtX_inv = (X.transpose() * X).inverse();
  const Eigen::VectorXd theta = XtX_inv * X.transpose() * y;
  const double s2 = (X * theta - y).squaredNorm() / (5 - 2);
  const Eigen::MatrixXd cov = s2 * XtX_inv;
  // The discretized trap levels equal ω (n + 1/2) to about 1e-10 hartree on the default grid.
  EXPECT_NEAR(res.fitted(0), theta(0), 1e-8);
  EXPECT_NEAR(res.fitted(1), theta(1), 1e-8);
  for (int i = 0; i < 2; ++i)
    EXPECT_NEAR(res.uncertainty.standard_error(i), std::sqrt(cov(i, i)), 1e-6 * std::sqrt(cov(i, i))) << i;
  EXPECT_NEAR(res.uncertainty.correlation(0, 1), cov(0, 1) / std::sqrt(cov(0, 0) * cov(1, 1)), 1e-6);
  EXPECT_EQ(res.uncertainty.degrees_of_freedom, 3);
}

TEST(FitUncertainty, GaussNewtonErrorsAndCorrelations) {
  sp::FitSpec spec = line_recovery_spec(sp::FitOptions::Optimizer::LevenbergMarquardt);
  spec.training[0].target = *spec.training[0].target + 2e-4;  // inconsistent data: nonzero residuals
  spec.training[1].target = *spec.training[1].target - 1e-4;
  const auto res = sp::run_fit(spec);
  ASSERT_TRUE(res.uncertainty.computed) << res.uncertainty.note;
  ASSERT_EQ(res.uncertainty.standard_error.size(), 2);
  EXPECT_GT(res.uncertainty.standard_error(0), 0.0);
  EXPECT_NEAR(res.uncertainty.correlation(0, 0), 1.0, 1e-12);
  EXPECT_NEAR(res.uncertainty.correlation(0, 1), res.uncertainty.correlation(1, 0), 1e-12);
  EXPECT_LT(std::abs(res.uncertainty.correlation(0, 1)), 1.0);

  // Independently: the textbook Gauss–Newton covariance s^2 (J^T J)^-1, s^2 = RSS / (m - p)
  // (e.g. Press et al., Numerical Recipes, §15.5; common practice), with J from central
  // differences of the residuals of the whole program at the optimum. It is invariant under a
  // common scaling of the residuals, so the fit's own normalization does not enter.
  sp::GradientOptions go = spec.gradient;
  go.scf.potential_tolerance = 1e-12;
  go.scf.energy_tolerance = 1e-13;
  go.scf.eigenvalue_tolerance = 1e-12;
  sp::GradientProblem gp(spec.systems, spec.parameters, spec.training, go);
  const Eigen::VectorXd r0 = gp.residuals(res.fitted, false).residuals;
  const int m = static_cast<int>(r0.size()), p = 2;
  Eigen::MatrixXd J(m, p);
  for (int j = 0; j < p; ++j) {
    const double h = 1e-4 * std::max(1.0, std::abs(res.fitted(j)));
    Eigen::VectorXd tp = res.fitted, tm = res.fitted;
    tp(j) += h;
    tm(j) -= h;
    J.col(j) = (gp.residuals(tp, false).residuals - gp.residuals(tm, false).residuals) / (2 * h);
  }
  const double s2 = r0.squaredNorm() / (m - p);
  const Eigen::MatrixXd cov = s2 * (J.transpose() * J).inverse();
  for (int j = 0; j < p; ++j)
    EXPECT_NEAR(res.uncertainty.standard_error(j), std::sqrt(cov(j, j)), 1e-3 * std::sqrt(cov(j, j))) << j;
  EXPECT_NEAR(res.uncertainty.correlation(0, 1), cov(0, 1) / std::sqrt(cov(0, 0) * cov(1, 1)), 1e-3);
}

// ---------------------------------------------------------------------------------------
// Workflow files and the command line.

namespace {

using clitest::Scratch;

// Two 1D systems (our own scenario) with the rational correlation model; references made by
// the program itself with a1 = 0.045 (manufactured data, see the top of this file).
const char* kLineSystems = R"(
[[system]]
name = "He"
kind = "line"
xc = ["lda_x_1d_soft", "model:rational_c_1d"]
grid = { preset = "default", half_width = 14.0 }
[[system.nucleus]]
charge = 2.0

[[system]]
name = "H2"
kind = "line"
xc = ["lda_x_1d_soft", "model:rational_c_1d"]
grid = { preset = "default", half_width = 14.0 }
[[system.nucleus]]
charge = 1.0
position = -0.8
[[system.nucleus]]
charge = 1.0
position = 0.8
)";

std::string error_of(const std::string& text, const std::string& file) {
  try {
    sp::parse_fit_workflow(text, file);
  } catch (const sp::InputError& e) {
    return e.what();
  }
  return "(no error)";
}

}  // namespace

TEST(FitWorkflowErrors, MissingReferenceFile) {
  const std::string w = std::string(kLineSystems) + R"(
[[parameter]]
kind = "xc_parameter"
term = "model:rational_c_1d"
fields = ["a1"]
[[loss]]
kind = "density"
system = "He"
reference = "no-such-density.csv"
)";
  const std::string e = error_of(w, "/tmp/wf.toml");
  EXPECT_NE(e.find("wf.toml:29:13"), std::string::npos) << e;
  EXPECT_NE(e.find("loss[0].reference"), std::string::npos) << e;
  EXPECT_NE(e.find("file not found"), std::string::npos) << e;
}

TEST(FitWorkflowErrors, UnknownSystemInEnergyDifference) {
  const std::string w = std::string(kLineSystems) + R"(
[[parameter]]
kind = "xc_parameter"
term = "model:rational_c_1d"
fields = ["a1"]
[[loss]]
kind = "energy_difference"
system = "H2"
minus = "Hee"
target = 0.5
)";
  const std::string e = error_of(w, "wf.toml");
  EXPECT_NE(e.find("wf.toml:29:9"), std::string::npos) << e;
  EXPECT_NE(e.find("loss[0].minus"), std::string::npos) << e;
  EXPECT_NE(e.find("no system named 'Hee'; did you mean 'He'?"), std::string::npos) << e;
}

TEST(FitWorkflowErrors, BoundsExcludeTheInitialValue) {
  const std::string w = std::string(kLineSystems) + R"(
[[parameter]]
kind = "xc_parameter"
term = "model:rational_c_1d"
fields = ["a1"]
lower = 0.05
upper = 0.2
[[loss]]
kind = "energy"
system = "He"
target = -2.2
)";
  const std::string e = error_of(w, "wf.toml");
  EXPECT_NE(e.find("wf.toml:26:9"), std::string::npos) << e;
  EXPECT_NE(e.find("parameter[0].lower"), std::string::npos) << e;
  EXPECT_NE(e.find("initial value 0.0306 of 'model:rational_c_1d.a1' lies outside its bounds [0.05, 0.2]"),
            std::string::npos)
      << e;
}

// L-BFGS cannot start on a bound; this is found while reading, at the bound's key, so that the
// fit command stops before it creates its output folder.
TEST(FitWorkflowErrors, StartOnABoundIsPlacedAtTheBound) {
  const std::string w = std::string(kLineSystems) + R"(
[[parameter]]
kind = "xc_parameter"
term = "model:rational_c_1d"
fields = ["a1"]
lower = 0.0306
upper = 0.2
[[loss]]
kind = "energy"
system = "He"
target = -2.2
)";
  const std::string e = error_of(w, "wf.toml");
  EXPECT_NE(e.find("wf.toml:26:9"), std::string::npos) << e;
  EXPECT_NE(e.find("parameter[0].lower"), std::string::npos) << e;
  EXPECT_NE(e.find("starts on one of its bounds"), std::string::npos) << e;
}

TEST(FitWorkflowErrors, EmptyTrainingSet) {
  const std::string w = std::string(kLineSystems) + R"(
[[parameter]]
kind = "xc_parameter"
term = "model:rational_c_1d"
fields = ["a1"]
[[loss]]
kind = "energy"
system = "He"
target = -2.2
set = "validation"
)";
  const std::string e = error_of(w, "wf.toml");
  EXPECT_NE(e.find("wf.toml:"), std::string::npos) << e;
  EXPECT_NE(e.find("the training set is empty"), std::string::npos) << e;
}

TEST(FitWorkflowErrors, MisspelledFitKeyAndLmWithoutTarget) {
  const std::string base = std::string(kLineSystems) + R"(
[[parameter]]
kind = "xc_parameter"
term = "model:rational_c_1d"
fields = ["a1"]
[[loss]]
kind = "energy"
system = "He"
)";
  std::string e = error_of("[fit]\nmax_iteration = 3\n" + base, "wf.toml");
  EXPECT_NE(e.find("wf.toml:2:17: key 'fit.max_iteration': unknown key; did you mean 'max_iterations'?"), std::string::npos) << e;
  e = error_of("[fit]\noptimizer = \"levenberg_marquardt\"\n" + base, "wf.toml");
  EXPECT_NE(e.find("loss[0].target"), std::string::npos) << e;
}

// End to end: a fit through the command line, its outputs, the fitted model accepted by
// solve (same energies) and by grad and a later fit through initial_model.
TEST(FitCli, OutputsAndFittedModelRoundTrip) {
  Scratch s;
  // Manufactured references: energies with a1 = 0.045 (b2 = 0.05 default).
  sp::SolveInput in = sp::parse_solve_input(kLineSystems, "ref.toml");
  std::vector<double> e;
  for (auto& sys : in.systems) {
    sys.xc_parameters = {{}, {0.045, 0.0, 0.0, 0.05, 0.0}};
    sp::KsProblem P(sys);
    e.push_back(sp::solve_scf(P).energy.total);
  }
  char targets[400];
  std::snprintf(targets, sizeof targets,
                "[[loss]]\nkind = \"energy\"\nsystem = \"He\"\ntarget = %.15f\n[[loss]]\nkind = \"energy\"\nsystem = \"H2\"\n"
                "target = %.15f\nset = \"validation\"\n",
                e[0], e[1]);
  const std::string w = "[fit]\noptimizer = \"levenberg_marquardt\"\nthreads = 2\n" + std::string(kLineSystems) +
                        "[[parameter]]\nkind = \"xc_parameter\"\nterm = \"model:rational_c_1d\"\nfields = [\"a1\"]\n"
                        "published = 0.045\npublished_source = \"manufactured\"\n" + targets;
  s.write("w.toml", w);
  const auto r = s.cli("fit w.toml --output out --quiet");
  ASSERT_EQ(r.rc, 0) << r.out << r.err;
  for (const char* f : {"fit.json", "parameters.csv", "terms.csv", "systems.csv", "history.csv", "He_density.csv",
                        "xc_model.csv", "fitted-model.toml", "checkpoint.bin"})
    EXPECT_TRUE(s.exists(std::string("out/") + f)) << f;
  const auto j = nlohmann::json::parse(s.read("out/fit.json"));
  EXPECT_EQ(j["units"]["energy"], "hartree");
  EXPECT_NEAR(j["parameters"][0]["fitted"].get<double>(), 0.045, 1e-6 * 0.045);
  EXPECT_EQ(j["parameters"][0]["published"].get<double>(), 0.045);
  EXPECT_TRUE(j["loss"]["validation"]["fitted"].is_number());
  EXPECT_EQ(j["terms"][1]["set"], "validation");
  // The linear solves met the default Krylov tolerance (1e-12, docs/grad.md).
  EXPECT_LE(j["max_linear_residual"].get<double>(), 1e-12);
  EXPECT_EQ(s.read("out/fit.json").find("NaN"), std::string::npos);
  // solve reproduces the fitted energies from the fitted-model file alone.
  const auto sv = s.cli("solve out/fitted-model.toml --output solved");
  ASSERT_EQ(sv.rc, 0) << sv.err;
  const auto jh = nlohmann::json::parse(s.read("solved/He.json"));
  EXPECT_NEAR(jh["energy"]["total"].get<double>(), j["systems"][0]["energy"]["fitted"].get<double>(), 1e-8);
  // grad and a later fit start from the fitted values.
  // (initial_model is a top-level key: it must come before the first table in TOML.)
  const std::string g = "initial_model = \"out/fitted-model.toml\"\n" + std::string(kLineSystems) +
                        "[[parameter]]\nkind = \"xc_parameter\"\nterm = \"model:rational_c_1d\"\nfields = [\"a1\"]\n" +
                        "[[loss]]\nkind = \"energy\"\nsystem = \"He\"\ntarget = " + std::to_string(e[0]) + "\n";
  s.write("g.toml", g);
  const auto gr = s.cli("grad g.toml --output gout");
  ASSERT_EQ(gr.rc, 0) << gr.err;
  const auto jg = nlohmann::json::parse(s.read("gout/grad.json"));
  EXPECT_EQ(jg["parameters"][0]["value"].get<double>(), j["parameters"][0]["fitted"].get<double>());
  // Bad input exits 2 with file and key.
  s.write("bad.toml", "[fit]\nthreads = 0\n" + std::string(kLineSystems) +
                         "[[parameter]]\nkind = \"xc_parameter\"\nterm = \"model:rational_c_1d\"\n" + targets);
  const auto b = s.cli("fit bad.toml --output bad");
  EXPECT_EQ(b.rc, 2);
  EXPECT_NE(b.err.find("bad.toml:2:11: key 'fit.threads'"), std::string::npos) << b.err;
}

// A fit whose first SCF fails exits 3 with the residual history and leaves no output folder
// (not even an empty one) when it had to create it.
TEST(FitCli, FailureAtTheStartLeavesNoFolder) {
  Scratch s;
  s.write("w.toml", "[scf]\nmax_iterations = 2\n" + std::string(kLineSystems) +
                        "[[parameter]]\nkind = \"xc_parameter\"\nterm = \"model:rational_c_1d\"\nfields = [\"a1\"]\n"
                        "[[loss]]\nkind = \"energy\"\nsystem = \"He\"\ntarget = -2.2\n");
  const auto r = s.cli("fit w.toml --output out --quiet");
  EXPECT_EQ(r.rc, 3) << r.out << r.err;
  EXPECT_NE(r.err.find("residual history"), std::string::npos) << r.err;
  EXPECT_FALSE(s.exists("out")) << "a failed fit left its output folder behind";
}

// Runs `stillpoint fit ARGS` in `dir` and sends `sig` once the progress line of iteration
// `after` has appeared on standard error (so the test does not depend on timing). Returns
// the exit status and the standard error text.
std::pair<int, std::string> fit_and_signal(const std::filesystem::path& dir, const std::vector<std::string>& args, int sig,
                                           int after) {
  int fd[2];
  if (::pipe(fd) != 0) return {-1, "pipe failed"};
  const pid_t pid = ::fork();
  if (pid == 0) {
    ::close(fd[0]);
    ::dup2(fd[1], 2);
    if (::chdir(dir.c_str()) != 0) ::_exit(127);
    ::setenv("OPENBLAS_NUM_THREADS", "1", 1);
    std::vector<char*> argv{const_cast<char*>(STILLPOINT_CLI_PATH), const_cast<char*>("fit")};
    for (const auto& a : args) argv.push_back(const_cast<char*>(a.c_str()));
    argv.push_back(nullptr);
    ::execv(STILLPOINT_CLI_PATH, argv.data());
    ::_exit(127);
  }
  ::close(fd[1]);
  std::string err, line;
  bool sent = false;
  char c;
  while (::read(fd[0], &c, 1) == 1) {
    err += c;
    if (c != '\n') {
      line += c;
      continue;
    }
    int it = -1;
    double loss = 0.0;
    if (!sent && std::sscanf(line.c_str(), "%d %lf", &it, &loss) == 2 && it >= after) {
      ::kill(pid, sig);
      sent = true;
    }
    line.clear();
  }
  ::close(fd[0]);
  int status = 0;
  ::waitpid(pid, &status, 0);
  return {WIFEXITED(status) ? WEXITSTATUS(status) : -1, err};
}

// Ctrl-C (SIGINT) stops a running fit cleanly with a checkpoint (exit 130, no report), SIGTERM
// likewise (exit 143), and --resume then reaches exactly the result of an uninterrupted run.
TEST(FitCli, InterruptWritesCheckpointAndResumeEqualsUninterrupted) {
  Scratch s;
  std::filesystem::copy_file(std::string(STILLPOINT_SOURCE_DIR) + "/workflows/data/fit-1d-potential-target.csv",
                             s.dir() / "target.csv");
  std::string w = clitest::slurp(std::string(STILLPOINT_SOURCE_DIR) + "/workflows/fit-1d-potential.toml");
  auto replace = [&](const std::string& a, const std::string& b) {
    const auto at = w.find(a);
    ASSERT_NE(at, std::string::npos) << a;
    w.replace(at, a.size(), b);
  };
  // A smaller box and fewer iterations than the demo: the same code paths, a second of work.
  replace("optimizer = \"levenberg_marquardt\"", "optimizer = \"lbfgs\"");  // many cheap iterations to interrupt
  replace("max_iterations = 200", "max_iterations = 20\ncheckpoint_every = 100\nuncertainties = false");
  replace("half_width = 10.0", "half_width = 7.0");
  replace("reference = \"data/fit-1d-potential-target.csv\"", "reference = \"target.csv\"");
  s.write("pot.toml", w);
  const auto full = s.cli("fit pot.toml --output full --quiet");
  ASSERT_EQ(full.rc, 0) << full.err;
  for (const auto& [sig, rc] : std::vector<std::pair<int, int>>{{SIGINT, 130}, {SIGTERM, 143}}) {
    const std::string dir = "part" + std::to_string(sig);
    const auto [status, err] = fit_and_signal(s.dir(), {"pot.toml", "--output", dir}, sig, 3);
    EXPECT_EQ(status, rc) << err;
    EXPECT_NE(err.find("checkpoint written"), std::string::npos) << err;
    EXPECT_TRUE(s.exists(dir + "/checkpoint.bin"));
    EXPECT_FALSE(s.exists(dir + "/fit.json"));
    const auto resumed = s.cli("fit pot.toml --output " + dir + " --resume --quiet");
    ASSERT_EQ(resumed.rc, 0) << resumed.err;
    EXPECT_EQ(s.read(dir + "/parameters.csv"), s.read("full/parameters.csv"));  // bit for bit (17 digits)
  }
  // --resume without a checkpoint is an input error.
  const auto none = s.cli("fit pot.toml --output nowhere --resume");
  EXPECT_EQ(none.rc, 2);
}

// [[dataset]]: an exact-reference folder (written by `stillpoint exact`) becomes systems and
// terms; the targets are the manifest's exact energies.
TEST(FitDataset, ExactManifestBecomesSystemsAndTerms) {
  const sp::FitWorkflow wf = sp::read_fit_workflow(std::string(STILLPOINT_SOURCE_DIR) + "/workflows/fit-1d-correlation.toml");
  EXPECT_EQ(wf.spec.systems.size(), 9u);
  EXPECT_EQ(wf.spec.training.size(), 10u);   // 5 systems x (energy, density)
  EXPECT_EQ(wf.spec.validation.size(), 8u);  // 4 systems x (energy, density)
  ASSERT_EQ(wf.spec.systems[1].name, "He_Z_002");
  // He_Z_002 is Z = 2, the 1D helium atom; its exact energy is -2.238258 (check-values.md §2).
  EXPECT_NEAR(*wf.spec.training[2].target, -2.23825782, 1e-6);
  EXPECT_EQ(wf.spec.parameters.size(), 3u);
}

// The residual Jacobian from tangent solves (GradientProblem::residuals, used by LM and for
// the uncertainties) against two independent routes: the adjoint gradient (dL/dtheta =
// 2 J^T r, docs/theory.md §3-4) and central finite differences of the
// residuals of the whole converged program (§10).
TEST(FitJacobian, TangentJacobianMatchesAdjointGradientAndFiniteDifferences) {
  static const Reference ref = solve_references(line_systems(kTrueC));
  auto systems = line_systems(kStartC);
  systems[0].line.potentials.push_back(sp::ExternalTerm{});
  systems[0].line.potentials.back().kind = sp::ExternalTerm::Kind::Gaussian;
  systems[0].line.potentials.back().depth = 0.2;
  std::vector<sp::ParameterRef> params{xc_param(1, 0, "a1", "a1"), xc_param(1, 3, "b2", "b2")};
  sp::ParameterRef depth;
  depth.kind = sp::ParameterRef::Kind::Gaussian;
  depth.system = 0;
  depth.index = 0;
  depth.field = "depth";
  depth.name = "depth";
  params.push_back(depth);
  std::vector<sp::LossTerm> terms{energy_term(0, ref.energy[0] + 0.01, 3.0), density_term(0, ref.density[0], 5.0),
                                  density_term(2, ref.density[2], 2.0)};
  sp::LossTerm homo;
  homo.kind = sp::LossTerm::Kind::Eigenvalue;
  homo.system = 1;
  homo.state = "homo";
  homo.target = -0.6;
  homo.weight = 4.0;
  terms.push_back(homo);
  sp::LossTerm diff;
  diff.kind = sp::LossTerm::Kind::EnergyDifference;
  diff.system = 2;
  diff.system_b = 0;
  diff.target = -5.0;
  diff.weight = 0.5;
  terms.push_back(diff);
  sp::GradientOptions opt;
  opt.scf = scf();
  sp::GradientProblem G(systems, params, terms, opt);
  const Eigen::VectorXd theta = G.initial_values();
  const auto r = G.residuals(theta, true);
  const auto g = G.evaluate(theta);
  EXPECT_NEAR(r.residuals.squaredNorm(), g.loss, 1e-12 * g.loss);
  const Eigen::VectorXd gn = 2.0 * r.jacobian.transpose() * r.residuals;
  for (int p = 0; p < theta.size(); ++p) EXPECT_NEAR(gn(p), g.gradient(p), 1e-8 * g.gradient.norm()) << params[p].name;
  // Central differences of the residual vector, Richardson-extrapolated (as in gradient_test.cpp).
  for (int p = 0; p < theta.size(); ++p) {
    auto res_at = [&](double h) {
      Eigen::VectorXd t = theta;
      t(p) += h;
      return G.residuals(t, false).residuals;
    };
    const double h = 1e-3 * std::max(std::abs(theta(p)), 0.1);
    const Eigen::VectorXd d1 = (res_at(h) - res_at(-h)) / (2 * h), d2 = (res_at(h / 2) - res_at(-h / 2)) / h;
    const Eigen::VectorXd fd = (4.0 * d2 - d1) / 3.0;
    EXPECT_LT((r.jacobian.col(p) - fd).norm(), 1e-6 * fd.norm() + 1e-9) << params[p].name;
  }
}

// L2 priors: a strong pull holds a parameter at its prior, for both optimizers (checks the
// regularization's value, gradient and Jacobian rows).
TEST(FitRegularization, StrongPriorHoldsTheParameter) {
  for (auto opt : {sp::FitOptions::Optimizer::Lbfgs, sp::FitOptions::Optimizer::LevenbergMarquardt}) {
    sp::FitSpec spec = line_recovery_spec(opt);
    spec.info[0].prior = 0.04;
    spec.info[0].prior_weight = 1e12;
    const auto res = sp::run_fit(spec);
    EXPECT_NEAR(res.fitted(0), 0.04, 1e-6);
    EXPECT_GT(res.after.regularization, 0.0);
    // b2 compensates as far as it can: the same as a fit of b2 alone with a1 fixed at the
    // prior (an independent path: no regularization term at all), and not the true b2.
    EXPECT_GT(std::abs(res.fitted(1) - kTrueC[3]), 1e-4);
    sp::FitSpec fixed = spec;
    std::vector<double> c = kStartC;
    c[0] = 0.04;
    fixed.systems = line_systems(c);
    fixed.parameters = {spec.parameters[1]};
    fixed.info = {spec.info[1]};
    const auto one = sp::run_fit(fixed);
    EXPECT_NEAR(res.fitted(1), one.fitted(0), 1e-5 * std::abs(one.fitted(0)));
  }
}

// BLYP through the fit: manufactured BLYP references (He, Be, Ne energies and the Ne density)
// with unit weights of the B88 and LYP terms, fitted back from (0.9, 1.15) with both optimizers.
TEST(FitRecovery, AtomBlypWeights) {
  std::vector<sp::SystemSpec> sys;
  for (const char* el : {"He", "Be", "Ne"}) sys.push_back(atom(el, false, {"gga_x_b88", "gga_c_lyp"}));
  const Reference ref = solve_references(sys);
  for (auto& s : sys) s.xc_weights = {0.9, 1.15};
  auto weight = [](int term, const char* name) {
    sp::ParameterRef r;
    r.kind = sp::ParameterRef::Kind::XcWeight;
    r.index = term;
    r.name = name;
    return r;
  };
  for (auto opt : {sp::FitOptions::Optimizer::Lbfgs, sp::FitOptions::Optimizer::LevenbergMarquardt}) {
    sp::FitSpec f;
    f.systems = sys;
    f.parameters = {weight(0, "w_b88"), weight(1, "w_lyp")};
    f.info.resize(2);
    for (auto& i : f.info) i.scale = 0.1;
    for (int s = 0; s < 3; ++s) f.training.push_back(energy_term(s, ref.energy[s], 1e6));
    f.training.push_back(density_term(2, ref.density[2], 1e2));
    f.gradient.scf = scf();
    f.options.optimizer = opt;
    f.options.max_iterations = 80;
    f.options.gradient_tolerance = 1e-14;
    f.options.step_tolerance = 1e-14;
    f.options.loss_tolerance = 1e-16;
    const auto res = sp::run_fit(f);
    SCOPED_TRACE(res.message);
    EXPECT_NEAR(res.fitted(0), 1.0, kRecovery);
    EXPECT_NEAR(res.fitted(1), 1.0, kRecovery);
  }
}
