// Whole-process costs (issue-12 figures): `solve` of the shipped demo and `check` of the shipped
// reference rows against a trivial run of the same executable (`--help`), which is what
// start-up alone costs. The three are run in turn, round after round, so that a slow phase of
// the machine hits all of them; the figures are medians over the rounds.
#include <sys/wait.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <string>
#include <vector>

namespace {

// Wall time of one run of argv, output discarded; a failed run returns a negative time.
double run_once(const std::vector<std::string>& argv) {
  std::vector<char*> args;
  for (const std::string& a : argv) args.push_back(const_cast<char*>(a.c_str()));
  args.push_back(nullptr);
  const auto t0 = std::chrono::steady_clock::now();
  const pid_t pid = fork();
  if (pid == 0) {
    if (std::FILE* null = std::freopen("/dev/null", "w", stdout); !null) _exit(127);
    if (std::FILE* null = std::freopen("/dev/null", "w", stderr); !null) _exit(127);
    execv(args[0], args.data());
    _exit(127);
  }
  if (pid < 0) return -1.0;
  int status = 0;
  waitpid(pid, &status, 0);
  const double t = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return WIFEXITED(status) && WEXITSTATUS(status) == 0 ? t : -1.0;
}

double median(std::vector<double> v) {
  std::sort(v.begin(), v.end());
  return v.size() % 2 ? v[v.size() / 2] : 0.5 * (v[v.size() / 2 - 1] + v[v.size() / 2]);
}

}  // namespace

void process_report() {
  const std::string cli = STILLPOINT_BENCH_CLI, src = STILLPOINT_BENCH_SOURCE;
  const std::filesystem::path out = std::filesystem::temp_directory_path() / ("stillpoint_bench_" + std::to_string(getpid()));
  std::filesystem::create_directories(out);
  struct Case {
    const char* what;
    std::vector<std::string> argv;
    std::vector<double> t;
  };
  std::vector<Case> cases = {
      {"--help (start-up alone)", {cli, "--help"}, {}},
      {"solve workflows/solve-demo.toml", {cli, "solve", src + "/workflows/solve-demo.toml", "--output", out.string(), "-q"}, {}},
      {"check of the shipped NIST rows", {cli, "check", src + "/basis-data/reference/nist-lda-lsd.csv", "-q"}, {}},
  };
  // OPENBLAS_NUM_THREADS=1 as in the README's figures: a worker pool would add its start-up.
  setenv("OPENBLAS_NUM_THREADS", "1", 1);
  const int rounds = 15;
  for (int r = 0; r < rounds; ++r)
    for (Case& c : cases) c.t.push_back(run_once(c.argv));
  std::filesystem::remove_all(out);
  std::printf("\nWhole processes of %s, medians of %d interleaved rounds:\n", cli.c_str(), rounds);
  const double t0 = median(cases[0].t);
  for (const Case& c : cases) {
    if (std::any_of(c.t.begin(), c.t.end(), [](double t) { return t < 0.0; })) {
      std::printf("  %-34s failed (non-zero exit)\n", c.what);
      continue;
    }
    const double t = median(c.t);
    std::printf("  %-34s %8.1f ms = %5.2f x start-up (%.1f ms beyond it)\n", c.what, 1e3 * t, t / t0, 1e3 * (t - t0));
  }
}
