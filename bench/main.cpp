// stillpoint benchmarks. Run: build/bench/stillpoint_bench
// Google Benchmark cases for the forward engine, then ratio measurements printed as text
// (ratios from one run are meaningful on noisy machines; absolute times are not).
#include <benchmark/benchmark.h>

#include <chrono>
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "stillpoint/numerics/eigensolver.hpp"
#include "stillpoint/response/gradient.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/numerics/kinetic.hpp"
#include "stillpoint/check/reference_check.hpp"
#include "stillpoint/ks/scf.hpp"

extern "C" void openblas_set_num_threads(int);

void exact_report();   // bench/exact_bench.cpp
void invert_report();  // bench/invert_bench.cpp
void fit_report();     // bench/fit_bench.cpp
void atom_report();    // bench/atom_bench.cpp
void ranks_report();   // bench/ranks_bench.cpp
void process_report(); // bench/process_bench.cpp

namespace sp = stillpoint;

namespace {

// 1D chain of `atoms` soft-Coulomb hydrogens, spacing 2 bohr, 1D LDA, with `nodes` grid nodes.
sp::SystemSpec chain(int atoms, int nodes) {
  sp::SystemSpec s;
  s.name = "chain";
  s.geometry = sp::Geometry::Line;
  s.xc = {"lda_x_1d_soft", "lda_c_1d_csc"};
  for (int i = 0; i < atoms; ++i) s.line.nuclei.push_back({1.0, 2.0 * (i - 0.5 * (atoms - 1)), 1.0});
  s.grid = sp::grid_preset(sp::Geometry::Line, "default");
  s.grid.half_width = 30.0;
  s.grid.element_size = 2.0 * s.grid.half_width * s.grid.degree / (nodes - 1);
  return s;
}

double seconds_since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

void BM_ReferenceAtoms(benchmark::State& state) {
  // All shipped reference atoms (Mg, Mg+; LDA and LSD) to the default SCF tolerances.
  const auto rows = sp::read_reference_table(STILLPOINT_BENCH_REFERENCE);
  sp::CheckOptions opt;
  for (auto _ : state) {
    auto rep = sp::run_reference_check(rows, opt);
    benchmark::DoNotOptimize(rep.max_abs_deviation);
  }
}
BENCHMARK(BM_ReferenceAtoms)->Unit(benchmark::kMillisecond);

void BM_Line2000Nodes10Electrons(benchmark::State& state) {
  const sp::KsProblem P(chain(10, 2001));
  int it = 0;
  for (auto _ : state) {
    auto sol = sp::solve_scf(P);
    it = sol.iterations;
  }
  state.counters["scf_iterations"] = it;
  state.counters["nodes"] = P.mesh().num_nodes();
}
BENCHMARK(BM_Line2000Nodes10Electrons)->Unit(benchmark::kMillisecond);

void BM_LineMapIteration(benchmark::State& state) {
  const sp::KsProblem P(chain(10, static_cast<int>(state.range(0)) + 1));
  const sp::KsSolution sol = sp::solve_scf(P);
  std::vector<sp::EigenWarmStart> warm = sol.warm;
  for (auto _ : state) {
    auto m = sp::evaluate_ks_map(P, sol.v_s, warm);
    benchmark::DoNotOptimize(m.energy.total);
  }
  state.SetComplexityN(state.range(0));
}
BENCHMARK(BM_LineMapIteration)->RangeMultiplier(2)->Range(1000, 16000)->Unit(benchmark::kMillisecond)->Complexity();

// Per-iteration cost against grid size: least-squares slope of log(time) on log(N).
void scaling_report() {
  std::vector<double> lx, ly;
  std::printf("\nPer-SCF-iteration cost of a 10-electron 1D chain (one warm Kohn-Sham map evaluation):\n");
  for (int n : {1000, 2000, 4000, 8000, 16000}) {
    const sp::KsProblem P(chain(10, n + 1));
    const sp::KsSolution sol = sp::solve_scf(P);
    std::vector<sp::EigenWarmStart> warm = sol.warm;
    int reps = 0;
    const auto t0 = std::chrono::steady_clock::now();
    while (seconds_since(t0) < 0.5 || reps < 3) {
      auto m = sp::evaluate_ks_map(P, sol.v_s, warm);
      benchmark::DoNotOptimize(m.energy.total);
      ++reps;
    }
    const double t = seconds_since(t0) / reps;
    std::printf("  N = %6d nodes: %8.3f ms per iteration (%d SCF iterations to converge)\n", P.mesh().num_nodes(),
                1e3 * t, sol.iterations);
    lx.push_back(std::log(n));
    ly.push_back(std::log(t));
  }
  double mx = 0, my = 0;
  for (std::size_t i = 0; i < lx.size(); ++i) mx += lx[i], my += ly[i];
  mx /= lx.size();
  my /= ly.size();
  double sxy = 0, sxx = 0;
  for (std::size_t i = 0; i < lx.size(); ++i) sxy += (lx[i] - mx) * (ly[i] - my), sxx += (lx[i] - mx) * (lx[i] - mx);
  std::printf("  fitted slope d log(time) / d log(N) = %.3f\n", sxy / sxx);
}

// The eigensolver used against dense diagonalization of the same matrix.
void eigensolver_report() {
  const sp::KsProblem P(chain(10, 2001));
  const sp::KsSolution sol = sp::solve_scf(P);
  const sp::Mesh& m = P.mesh();
  const Eigen::SparseMatrix<double> T = sp::scaled_kinetic(m, 0);
  const Eigen::VectorXd diag = sol.v_s[0].segment(1, m.num_unknowns());
  const int count = 7;
  sp::LowestEigensolver solver(T);
  auto time_it = [](auto&& f) {
    int reps = 0;
    const auto t0 = std::chrono::steady_clock::now();
    while (seconds_since(t0) < 0.3 || reps < 2) {
      f();
      ++reps;
    }
    return seconds_since(t0) / reps;
  };
  sp::Eigenpairs cold, warm_result, dense;
  const double t_cold = time_it([&] {
    sp::EigenWarmStart w;
    w.lower_bound = diag.minCoeff();
    cold = solver.solve(diag, count, w);
  });
  sp::EigenWarmStart w0;
  solver.solve(diag, count, w0);
  const double t_warm = time_it([&] {
    sp::EigenWarmStart w = w0;
    warm_result = solver.solve(diag, count, w);
  });
  Eigen::MatrixXd H = Eigen::MatrixXd(T);
  H.diagonal() += diag;
  const double t_dense = time_it([&] { dense = sp::dense_lowest_eigenpairs(H, count); });
  std::printf("\nLowest %d states of a %d-row 1D Kohn-Sham matrix (band width %d):\n", count, static_cast<int>(diag.size()),
              m.degree());
  std::printf("  dense LAPACK (Armadillo eig_sym): %9.3f ms\n", 1e3 * t_dense);
  std::printf("  shift-invert Lanczos, cold:       %9.3f ms   dense / cold = %.1f\n", 1e3 * t_cold, t_dense / t_cold);
  std::printf("  inverse iteration, warm (SCF):    %9.3f ms   dense / warm = %.1f\n", 1e3 * t_warm, t_dense / t_warm);
  std::printf("  max |eigenvalue difference| sparse vs dense: %.2e Ha\n",
              (cold.values - dense.values).cwiseAbs().maxCoeff());
}

// Gradient costs for a 1D two-electron system: adjoint gradient over the SCF it differentiates
// for 1, 10 and grid-many parameters; adjoint against central finite differences at 500 grid
// parameters; tangent against adjoint per parameter.
void gradient_report(int nodes) {
  sp::SystemSpec s = chain(1, nodes);
  s.line.nuclei = {{2.0, 0.0, 1.0}};
  s.grid.half_width = 20.0;
  s.grid.element_size = 2.0 * s.grid.half_width * s.grid.degree / (nodes - 1);
  sp::ExternalTerm g;
  g.kind = sp::ExternalTerm::Kind::Gaussian;
  g.depth = 0.2;
  g.center = 0.3;
  g.width = 1.0;
  s.line.potentials = {g};
  const sp::KsProblem P0(s);
  sp::KsSolution ref;
  {
    sp::SystemSpec r = s;
    r.line.potentials[0].depth = 0.3;
    const sp::KsProblem Pr(r);
    ref = sp::solve_scf(Pr);
  }
  sp::LossTerm d;
  d.kind = sp::LossTerm::Kind::Density;
  const Eigen::VectorXd nr = ref.total_density();
  d.reference.assign(nr.data(), nr.data() + nr.size());
  const int N = P0.mesh().num_nodes();
  auto grid_params = [&](int count) {
    std::vector<sp::ParameterRef> ps;
    for (int i = 0; i < count; ++i) {
      sp::ParameterRef r;
      r.kind = sp::ParameterRef::Kind::GridPotential;
      r.index = 1 + static_cast<int>(static_cast<long>(i) * (N - 3) / std::max(1, count - 1));
      r.name = std::string("v").append(std::to_string(r.index));  // append: GCC 12 -Wrestrict false positive
      ps.push_back(r);
    }
    return ps;
  };
  auto time_scf = [&] {
    int reps = 0;
    const auto t0 = std::chrono::steady_clock::now();
    while (seconds_since(t0) < 0.5 || reps < 3) {
      auto sol = sp::solve_scf(P0);
      benchmark::DoNotOptimize(sol.energy.total);
      ++reps;
    }
    return seconds_since(t0) / reps;
  };
  const double t_scf = time_scf();
  std::printf("\nGradient of a density loss, 1D two-electron atom, %d nodes (chi0 by %s):\n", N,
              N - 2 <= 200 ? "sum over states" : "Sternheimer");
  std::printf("  SCF from scratch: %.2f ms\n", 1e3 * t_scf);
  for (int count : {1, 10, N - 2}) {
    const auto ps = grid_params(count);
    sp::GradientProblem G({s}, ps, {d});
    const Eigen::VectorXd th = G.initial_values();
    G.evaluate(th);  // warm
    double tg = 0.0;
    int reps = 0;
    const auto t0 = std::chrono::steady_clock::now();
    while (seconds_since(t0) < 0.5 || reps < 3) {
      const auto r = G.evaluate(th);
      tg += r.gradient_seconds;
      ++reps;
    }
    std::printf("  adjoint, %5d parameters: gradient %.2f ms = %.3f x SCF\n", count, 1e3 * tg / reps, tg / reps / t_scf);
  }
  {
    // 500 Gaussian wells of zero depth spread over the density, their depths the parameters:
    // each parameter has its own potential to build, unlike a grid value.
    sp::SystemSpec w = s;
    const int count = 500;
    for (int i = 0; i < count; ++i) {
      sp::ExternalTerm t = g;
      t.depth = 0.0;
      t.center = -8.0 + 16.0 * i / (count - 1);
      t.width = 0.5;
      w.line.potentials.push_back(t);
    }
    std::vector<sp::ParameterRef> ps;
    for (int i = 0; i < count; ++i) {
      sp::ParameterRef r;
      r.kind = sp::ParameterRef::Kind::Gaussian;
      r.index = 1 + i;
      r.field = "depth";
      r.name = std::string("d").append(std::to_string(i));
      ps.push_back(r);
    }
    const sp::KsProblem Pw(w);
    int reps = 0;
    auto t0 = std::chrono::steady_clock::now();
    while (seconds_since(t0) < 0.5 || reps < 3) {
      benchmark::DoNotOptimize(sp::solve_scf(Pw).energy.total);
      ++reps;
    }
    const double t_scf_w = seconds_since(t0) / reps;
    sp::GradientProblem G({w}, ps, {d});
    const Eigen::VectorXd th = G.initial_values();
    G.evaluate(th);  // warm
    double tg = 0.0;
    reps = 0;
    t0 = std::chrono::steady_clock::now();
    while (seconds_since(t0) < 0.5 || reps < 3) {
      tg += G.evaluate(th).gradient_seconds;
      ++reps;
    }
    std::printf("  adjoint, %5d Gaussian depths: gradient %.2f ms = %.3f x SCF (%.2f ms)\n", count, 1e3 * tg / reps,
                tg / reps / t_scf_w, 1e3 * t_scf_w);
  }
  {
    const int count = std::min(500, N - 2);  // distinct nodes only
    const auto ps = grid_params(count);
    sp::GradientProblem G({s}, ps, {d});
    const Eigen::VectorXd th = G.initial_values();
    const auto t0 = std::chrono::steady_clock::now();
    const auto r = G.evaluate(th);
    const double t_adj = seconds_since(t0);
    sp::ScfOptions o;  // tight enough that FD noise stays below the gradient's size
    o.potential_tolerance = 1e-11;
    o.energy_tolerance = 1e-12;
    o.eigenvalue_tolerance = 1e-11;
    const auto t1 = std::chrono::steady_clock::now();
    Eigen::VectorXd steps = Eigen::VectorXd::Constant(th.size(), 1e-4);
    // Plain central differences (2 SCFs per parameter, warm-started), the cheapest honest FD.
    Eigen::VectorXd fd(th.size());
    for (int p = 0; p < th.size(); ++p) {
      Eigen::VectorXd a = th, b = th;
      a(p) += steps(p);
      b(p) -= steps(p);
      fd(p) = (G.loss(a, &o) - G.loss(b, &o)) / (2e-4);
    }
    const double t_fd = seconds_since(t1);
    std::printf("  %d grid parameters: adjoint (SCF + gradient) %.3f s, central differences %.2f s, ratio FD/adjoint = %.0f\n",
                count, t_adj, t_fd, t_fd / t_adj);
    std::printf("    max |adjoint - FD| / max |gradient| = %.1e\n",
                (r.gradient - fd).cwiseAbs().maxCoeff() / r.gradient.cwiseAbs().maxCoeff());
  }
  {
    // Tangent: one solve per parameter; adjoint: one solve per scalar output. For a Jacobian of
    // m residuals by p parameters tangent wins when p < m.
    const auto ps = grid_params(10);
    sp::GradientOptions tan;
    tan.mode = sp::GradientOptions::Mode::Tangent;
    sp::GradientProblem T({s}, ps, {d}, tan), A({s}, ps, {d});
    const Eigen::VectorXd th = T.initial_values();
    T.evaluate(th);
    A.evaluate(th);
    const auto rt = T.evaluate(th);
    const auto ra = A.evaluate(th);
    std::printf("  per linear solve: tangent %.2f ms, adjoint %.2f ms; a Jacobian of m residuals by p parameters costs\n"
                "    p tangent or m adjoint solves, so tangent overtakes adjoint when p < m (here m = %d density nodes)\n",
                1e3 * rt.gradient_seconds / rt.linear_solves, 1e3 * ra.gradient_seconds / std::max(1, ra.linear_solves), N);
  }
}

}  // namespace

// --reports=LIST (comma-separated: scaling, eigensolver, gradient, atoms, exact, invert, fit, ranks, process; default
// all) picks the ratio reports; Google Benchmark's own flags pick its cases
// (--benchmark_filter=NONE skips them), so one report can be re-measured in seconds.
int main(int argc, char** argv) {
  openblas_set_num_threads(1);
  std::string reports = "scaling,eigensolver,gradient,atoms,exact,invert,fit,ranks,process";
  std::vector<char*> rest;
  for (int i = 0; i < argc; ++i) {
    const std::string a = argv[i];
    if (a.rfind("--reports=", 0) == 0)
      reports = a.substr(10);
    else
      rest.push_back(argv[i]);
  }
  reports.insert(0, 1, ',');
  reports.push_back(',');
  int n = static_cast<int>(rest.size());
  benchmark::Initialize(&n, rest.data());
  benchmark::RunSpecifiedBenchmarks();
  benchmark::Shutdown();
  auto wanted = [&](const char* name) {
    std::string key(1, ',');  // built by appending: GCC 12 warns falsely on operator+ chains
    key.append(name).push_back(',');
    return reports.find(key) != std::string::npos;
  };
  if (wanted("scaling")) scaling_report();
  if (wanted("eigensolver")) eigensolver_report();
  if (wanted("gradient")) {
    gradient_report(481);
    gradient_report(2401);
  }
  if (wanted("atoms")) atom_report();
  if (wanted("exact")) exact_report();
  if (wanted("invert")) invert_report();
  if (wanted("fit")) fit_report();
  if (wanted("ranks")) ranks_report();
  if (wanted("process")) process_report();
  return 0;
}
