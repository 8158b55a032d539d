// Fit benchmarks (called from bench/main.cpp as fit_report()):
//  - time per fit iteration against the time of one SCF of every system (cold start);
//  - speed-up of the system evaluations with 2 threads;
//  - whole-demo wall time of the workflows/fit-*.toml demos (fit plus reports, no plots).
// Ratios from one run are meaningful on a noisy machine; absolute times are not.
#include <chrono>
#include <cstdio>
#include <string>

#include "stillpoint/fit/fit.hpp"
#include "stillpoint/fit/input.hpp"
#include "stillpoint/fit/report.hpp"
#include "stillpoint/ks/scf.hpp"

extern "C" void openblas_set_num_threads(int) __attribute__((weak));

namespace sp = stillpoint;

namespace {

double since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

std::string source_dir() {
  // STILLPOINT_BENCH_REFERENCE is <source>/basis-data/reference/nist-lda-lsd.csv.
  const std::string ref = STILLPOINT_BENCH_REFERENCE;
  return ref.substr(0, ref.rfind("/basis-data/"));
}

// One cold SCF of every system that a loss term refers to, in sequence.
double scf_of_every_system(const sp::FitSpec& spec) {
  std::vector<bool> used(spec.systems.size(), false);
  for (const auto* set : {&spec.training, &spec.validation})
    for (const auto& t : *set) {
      used[t.system] = true;
      if (t.system_b >= 0) used[t.system_b] = true;
    }
  const auto t0 = std::chrono::steady_clock::now();
  for (std::size_t s = 0; s < spec.systems.size(); ++s) {
    if (!used[s]) continue;
    sp::KsProblem P(spec.systems[s]);
    P.set_density_threshold(spec.gradient.density_threshold);
    (void)sp::solve_scf(P, spec.gradient.scf);
  }
  return since(t0);
}

struct Timing {
  double seconds = 0.0;
  int iterations = 0;
  double per_iteration = 0.0;
};

Timing time_fit(sp::FitSpec spec, int threads, int max_iterations) {
  spec.options.threads = threads;
  spec.options.uncertainties = false;  // per-iteration cost only (the errors need a Jacobian at the end)
  if (max_iterations > 0) spec.options.max_iterations = max_iterations;
  const auto t0 = std::chrono::steady_clock::now();
  const sp::FitResult r = sp::run_fit(spec);
  Timing t;
  t.seconds = since(t0);
  for (const auto& h : r.history) t.iterations = std::max(t.iterations, h.iteration);
  t.per_iteration = t.iterations ? t.seconds / t.iterations : 0.0;
  return t;
}

}  // namespace

void fit_report() {
  if (openblas_set_num_threads) openblas_set_num_threads(1);
  const std::string dir = source_dir() + "/workflows/";
  std::printf("\nFit benchmark (workflows/fit-*.toml; seconds of wall time):\n");
  std::printf("  %-28s %10s %12s %10s %12s %12s %10s\n", "demo", "SCF all", "s/iteration", "ratio", "1 thread", "2 threads",
              "speed-up");
  for (const char* name : {"fit-atoms-xalpha", "fit-atoms-exchange", "fit-1d-correlation", "fit-1d-formula", "fit-1d-potential"}) {
    sp::FitWorkflow wf;
    try {
      wf = sp::read_fit_workflow(dir + name + ".toml");
    } catch (const std::exception& e) {
      std::printf("  %-28s skipped: %s\n", name, e.what());
      continue;
    }
    const double scf = scf_of_every_system(wf.spec);
    // A fixed number of iterations, so that both thread counts do the same work.
    const int its = 6;
    const Timing one = time_fit(wf.spec, 1, its), two = time_fit(wf.spec, 2, its);
    std::printf("  %-28s %10.3f %12.4f %10.2f %12.3f %12.3f %10.2f\n", name, scf, one.per_iteration,
                scf > 0 ? one.per_iteration / scf : 0.0, one.seconds, two.seconds, two.seconds > 0 ? one.seconds / two.seconds : 0.0);
  }
  std::printf("  (SCF all: one cold SCF of every system; ratio = time per fit iteration / SCF all, 1 thread;\n"
              "   the thread columns run the first iterations of each fit with 1 and 2 threads)\n");
  std::printf("\nWhole demos as the command runs them (workflow threads, reports written to memory, no plots):\n");
  for (const char* name : {"fit-atoms-xalpha", "fit-atoms-exchange", "fit-1d-correlation", "fit-1d-formula", "fit-1d-potential"}) {
    try {
      const auto t0 = std::chrono::steady_clock::now();
      const sp::FitWorkflow wf = sp::read_fit_workflow(dir + name + ".toml");
      const sp::FitResult r = sp::run_fit(wf.spec);
      const auto files = sp::fit_output_files(wf, r);
      int its = 0;
      for (const auto& h : r.history) its = std::max(its, h.iteration);
      std::printf("  %-28s %8.2f s  (%d iterations, %d evaluations, %zu files, %d thread(s))\n", name, since(t0), its,
                  r.evaluations, files.size(), wf.spec.options.threads);
    } catch (const std::exception& e) {
      std::printf("  %-28s failed: %s\n", name, e.what());
    }
  }
}
