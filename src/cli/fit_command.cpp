// `stillpoint fit`: fit model functionals or potentials to reference data (docs/fit.md).
#include <csignal>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <iostream>

#include "commands.hpp"
#include "stillpoint/common/atomic_file.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/fit/fit.hpp"
#include "stillpoint/fit/input.hpp"
#include "stillpoint/fit/report.hpp"

namespace sp = stillpoint;
namespace fs = std::filesystem;

// OpenBLAS threads inside threaded system evaluations would oversubscribe the cores (and
// its threaded kernels need not sum in a fixed order); weak, so other BLAS builds link too.
extern "C" void openblas_set_num_threads(int) __attribute__((weak));

namespace {

std::atomic<int> g_signal{0};

extern "C" void on_signal(int sig) {
  g_signal.store(sig);
  std::signal(sig, SIG_DFL);  // a second Ctrl-C ends the process at once
}

// Test hook for the MPI tests: STILLPOINT_TEST_KILL_RANK_AT="R:N" makes rank R end itself with
// SIGKILL after iteration N, as a node failure would (the job must end, --resume continue).
void kill_hook(int iteration) {
  static const char* spec = std::getenv("STILLPOINT_TEST_KILL_RANK_AT");
  int rank = -1, at = -1;
  if (spec && std::sscanf(spec, "%d:%d", &rank, &at) == 2 && rank == ranks().rank() && iteration == at) std::raise(SIGKILL);
}

class Progress final : public sp::FitObserver {
 public:
  explicit Progress(bool quiet) : quiet_(quiet) {}
  void iteration(const sp::FitIteration& it) override {
    kill_hook(it.iteration);
    if (quiet_) return;
    if (!header_) {
      std::fprintf(stderr, "  iter            loss       |gradient|       validation    seconds   (loss units; docs/fit.md)\n");
      header_ = true;
    }
    char v[32] = "               -";
    if (std::isfinite(it.validation_loss)) std::snprintf(v, sizeof v, "%16.8e", it.validation_loss);
    std::fprintf(stderr, "  %4d  %14.8e  %15.6e  %s  %9.2f%s\n", it.iteration, it.loss, it.gradient_norm, v, it.seconds,
                 it.step_successful ? "" : "  (step rejected)");
  }
  void message(const std::string& m) override {
    if (!quiet_) std::fprintf(stderr, "  %s\n", m.c_str());
  }

 private:
  bool quiet_;
  bool header_ = false;
};

}  // namespace

// Restores the default signal dispositions however run_fit ends.
struct SignalGuard {
  SignalGuard() {
    g_signal.store(0);
    std::signal(SIGINT, on_signal);
    std::signal(SIGTERM, on_signal);
  }
  ~SignalGuard() {
    std::signal(SIGINT, SIG_DFL);
    std::signal(SIGTERM, SIG_DFL);
  }
};

int run_fit(const FitCommandOptions& o) {
  // From the start: a signal that arrives while the workflow is read or the start point is
  // evaluated still ends the run cleanly (with a checkpoint that holds nothing yet).
  const SignalGuard guard;
  sp::FitWorkflow wf = sp::read_fit_workflow(o.input);
  if (o.threads > 0) wf.spec.options.threads = o.threads;
  if (openblas_set_num_threads) openblas_set_num_threads(1);
  for (const auto& w : wf.warnings) std::cerr << "stillpoint: warning: " << w << "\n";
  const std::string dir = o.output.empty() ? fs::path(o.input).stem().string() + "-fit" : o.output;
  const std::string checkpoint = (fs::path(dir) / "checkpoint.bin").string();
  if (o.resume && !fs::exists(checkpoint))
    throw sp::InputError(sp::SourceLocation{checkpoint, 0, 0, ""},
                         "--resume: no checkpoint here (run without --resume to start, or give the --output of the "
                         "interrupted run)");
  if (!o.resume && fs::exists(checkpoint) && !o.quiet)
    std::cerr << "stillpoint: note: starting over; the checkpoint in " << dir << " is replaced (use --resume to continue it)\n";
  if (!o.quiet) {
    std::fprintf(stderr, "fit %s: %zu free parameter(s), %zu training and %zu validation term(s), %zu system(s), %s, %d thread(s)\n",
                 o.input.c_str(), wf.spec.parameters.size(), wf.spec.training.size(), wf.spec.validation.size(),
                 wf.spec.systems.size(),
                 wf.spec.options.optimizer == sp::FitOptions::Optimizer::Lbfgs ? "L-BFGS (adjoint gradients)"
                                                                                : "Levenberg-Marquardt (tangent Jacobians)",
                 wf.spec.options.threads);
  }
  Progress progress(o.quiet);
  sp::FitRunOptions run;
  run.checkpoint = checkpoint;
  run.resume = o.resume;
  run.stop = &g_signal;
  run.observer = &progress;
  run.communicator = &ranks();
  // A run that fails before it has written anything leaves no empty folder behind.
  const bool created = !fs::exists(dir);
  if (writes_files()) fs::create_directories(dir);
  sp::FitResult res;
  try {
    res = sp::run_fit(wf.spec, run);
  } catch (...) {
    std::error_code ec;
    if (created && writes_files() && fs::is_empty(dir, ec)) fs::remove(dir, ec);
    throw;
  }
  if (res.termination == sp::FitResult::Termination::Interrupted) {
    const int sig = g_signal.load();
    std::cerr << "stillpoint: fit interrupted" << (sig == SIGTERM ? " (SIGTERM)" : sig == SIGINT ? " (SIGINT)" : "")
              << " after iteration " << (res.history.empty() ? 0 : res.history.back().iteration) << "; checkpoint written to "
              << checkpoint << "\n  continue with: stillpoint fit " << o.input << " --output " << dir << " --resume\n";
    return sig == SIGTERM ? 143 : 130;
  }
  if (!writes_files()) return 0;
  const sp::OutputFiles files = sp::fit_output_files(wf, res);
  std::vector<std::pair<std::string, std::string>> set;  // all files or none
  for (const auto& [name, text] : files) set.emplace_back((fs::path(dir) / name).string(), text);
  sp::write_files_atomically(set);
  std::string plot_note;
  if (wf.plots) {
    const sp::OutputFiles scripts = sp::fit_plot_scripts(wf, res);
    for (const auto& [name, text] : scripts) sp::write_file_atomically((fs::path(dir) / name).string(), text);
    plot_note = sp::render_plots(dir, scripts);
  }
  std::cout << sp::fit_summary(wf, res);
  std::cout << "  wrote " << dir << "/fit.json, CSV tables, fitted-model.toml"
            << (wf.plots && plot_note.empty() ? " and plots/*.png, *.svg" : "") << "\n";
  if (!plot_note.empty()) std::cerr << "stillpoint: note: " << plot_note << "\n";
  return 0;
}
