// stillpoint command line: a thin layer over the library.
//   exit 0  success
//   exit 1  a check or verification found values outside tolerance
//   exit 2  unusable input (file, key, value)
//   exit 3  numerical failure (for example an SCF that did not converge)
//   exit 4  internal error (a bug in stillpoint)
//   exit 5  output could not be written (disk full, unwritable folder)
//
// Output files are all-or-nothing per run: `solve` first reads and discretizes every system
// (so input errors in any system stop the run before any SCF), then solves all of them, and
// only when every system has converged to finite results writes the files. Each file is
// written atomically (temporary file + rename), so a reader never sees a partial file.
#include <fcntl.h>
#include <unistd.h>

#include <CLI/CLI.hpp>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <iostream>

#include "commands.hpp"
#include "stillpoint/common/atomic_file.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/input.hpp"
#include "stillpoint/check/reference_check.hpp"
#include "stillpoint/ks/report.hpp"
#include "stillpoint/parallel/solve_systems.hpp"
#ifdef STILLPOINT_HAVE_MPI
#include "stillpoint/parallel/mpi.hpp"
#endif

namespace sp = stillpoint;
namespace fs = std::filesystem;

// OpenBLAS's own threads only add contention for the small banded problems solved here.
extern "C" void openblas_set_num_threads(int);

namespace {

// An output directory that cannot work is an input error found before any computation.
void check_output_dir(const std::string& dir) {
  if (dir.empty()) return;
  std::error_code ec;
  if (fs::exists(dir, ec) && !fs::is_directory(dir, ec))
    throw sp::InputError("--output " + dir + ": exists and is not a directory");
}

void check_output_file(const std::string& path, const char* option) {
  if (path.empty()) return;
  std::error_code ec;
  if (fs::is_directory(path, ec))
    throw sp::InputError(std::string(option) + " " + path + ": is a directory; give a file name");
  // Before any computation: the nearest existing folder above the file must be a writable
  // folder, so that no report is lost after minutes of work (and none is written without the others).
  fs::path up = fs::absolute(fs::path(path), ec).parent_path();
  while (!up.empty() && !fs::exists(up, ec) && up != up.root_path()) up = up.parent_path();
  if (!fs::is_directory(up, ec))
    throw sp::OutputError(path, std::string(option) + ": '" + up.string() + "' is not a folder");
  if (::access(up.c_str(), W_OK) != 0)
    throw sp::OutputError(path, std::string(option) + ": the folder '" + up.string() + "' is not writable");
}

// Two spellings of one file (relative, absolute, through links); a file that does not exist
// yet is compared by its absolute, normalized path.
bool same_path(const std::string& a, const std::string& b) {
  std::error_code ec;
  if (fs::exists(a, ec) && fs::exists(b, ec)) return fs::equivalent(a, b, ec);
  return fs::weakly_canonical(fs::absolute(a), ec) == fs::weakly_canonical(fs::absolute(b), ec);
}

std::string format_g(double v) {
  char buf[32];
  std::snprintf(buf, sizeof buf, "%g", v);
  return buf;
}

// CLI11's PositiveNumber lets NaN through and prints its upper bound with 309 digits.
CLI::Validator positive_finite() {
  return CLI::Validator(
      [](std::string& text) {
        char* end = nullptr;
        const double v = std::strtod(text.c_str(), &end);
        if (end == text.c_str() || *end != '\0' || !std::isfinite(v) || !(v > 0))
          return "must be a positive finite number, not '" + text + "'";
        return std::string();
      },
      "POSITIVE");
}

bool solution_is_finite(const sp::KsSolution& s) {
  for (const auto& v : s.density)
    if (!v.allFinite()) return false;
  for (const auto& v : s.v_s)
    if (!v.allFinite()) return false;
  for (const auto& v : s.v_xc)
    if (!v.allFinite()) return false;
  if (!s.v_h.allFinite() || !s.v_ext.allFinite()) return false;
  const sp::EnergyParts& E = s.energy;
  for (double v : {E.total, E.kinetic, E.external, E.hartree, E.xc, E.nuclear_repulsion, E.band})
    if (!std::isfinite(v)) return false;
  for (const auto& lv : s.levels)
    if (!std::isfinite(lv.energy)) return false;
  return true;
}

int run_solve(const std::string& file, const std::string& out_dir, bool verbose, bool quiet) {
  check_output_dir(out_dir);
  sp::SolveInput in = sp::read_solve_input(file);
  if (verbose) in.scf.verbose = true;
  const std::size_t n = in.systems.size();

  // 1. Discretize every system before solving any, so that a bad grid or occupation in the
  //    last system is reported at once and not after minutes of SCF on the first ones.
  std::vector<sp::KsProblem> problems;
  problems.reserve(n);
  for (std::size_t i = 0; i < n; ++i) {
    try {
      problems.emplace_back(in.systems[i]);
    } catch (const sp::InputError& e) {
      if (!e.where().file.empty()) throw;
      throw sp::InputError(in.system_locations[i], "system '" + in.systems[i].name + "': " + e.what());
    }
    problems.back().set_density_threshold(in.density_threshold);
  }

  // 2. Solve them all (under MPI each rank its share); print each summary in input order.
  std::vector<sp::KsSolution> solutions = sp::solve_systems(
      problems, in.scf, ranks(),
      [&](int i) {
        if (!quiet)
          std::cerr << "  solve [" << i + 1 << "/" << n << "] " << in.systems[i].name << " ("
                    << problems[i].mesh().num_nodes() << " nodes) ...\n";
      },
      [&](int i, const std::exception_ptr& e) {
        try {
          std::rethrow_exception(e);
        } catch (const sp::NumericalError& x) {
          const sp::SourceLocation& w = in.system_locations[i];
          throw sp::NumericalError("system '" + in.systems[i].name + "' (" + w.describe() + "): " + x.what() +
                                       (out_dir.empty() ? "" : "; no output files were written"),
                                   x.details());
        }
      },
      [&](int i, const sp::KsSolution& solution) {
        if (!solution_is_finite(solution))
          throw sp::NumericalError("system '" + in.systems[i].name + "': the converged solution contains NaN or Inf" +
                                   (out_dir.empty() ? "" : "; no output files were written"));
        std::cout << sp::format_solution(problems[i], solution) << std::flush;
      });

  // 3. Write the files only when every system succeeded.
  if (!out_dir.empty() && writes_files()) {
    for (std::size_t i = 0; i < n; ++i) {
      sp::write_solution_files(out_dir, problems[i], solutions[i]);
      std::cout << "wrote " << (fs::path(out_dir) / in.systems[i].name).string()
                << "{.json,_density.csv,_potentials.csv}\n";
    }
  }
  return 0;
}

int run_check(const std::vector<std::string>& tables, double tolerance, const std::string& report,
              const std::string& junit, const std::string& grid, bool quiet) {
  // Also checked here for callers that bypass the option parser.
  if (!(std::isfinite(tolerance) && tolerance > 0))
    throw sp::InputError("--tolerance must be a positive finite number (hartree), not " + format_g(tolerance));
  check_output_file(report, "--report");
  check_output_file(junit, "--junit");
  if (!report.empty() && !junit.empty() && same_path(report, junit))
    throw sp::InputError("--report and --junit name the same file '" + report + "'; give two different paths");
  for (std::size_t i = 0; i < tables.size(); ++i)
    for (std::size_t j = 0; j < i; ++j)
      if (same_path(tables[i], tables[j]))
        throw sp::InputError(sp::SourceLocation{tables[i], 0, 0, ""},
                             "this table is given twice (arguments " + std::to_string(j + 1) + " and " +
                                 std::to_string(i + 1) + "); its rows would be counted twice");
  try {
    (void)sp::grid_preset(sp::Geometry::Radial, grid);
  } catch (const sp::InputError& e) {
    throw sp::InputError(std::string("--grid: ") + e.what());
  }
  // Every table is read and validated before the first SCF.
  std::vector<sp::ReferenceRow> rows;
  for (const auto& t : tables) {
    auto r = sp::read_reference_table(t);
    rows.insert(rows.end(), r.begin(), r.end());
  }
  if (rows.empty())
    throw sp::InputError(sp::SourceLocation{tables.front(), 0, 0, ""}, "the reference tables hold no values to check");
  sp::CheckOptions opt;
  opt.tolerance = tolerance;
  opt.grid = grid;
  opt.communicator = &ranks();
  if (!quiet) opt.progress = [](const std::string& s) { std::cerr << "  done: " << s << "\n"; };
  const sp::CheckReport rep = sp::run_reference_check(rows, opt);
  std::cout << sp::format_check_table(rep, tolerance);
  // All reports or none.
  std::vector<std::pair<std::string, std::string>> outputs;
  if (!writes_files()) return rep.n_failed == 0 ? 0 : 1;
  if (!report.empty()) outputs.emplace_back(report, sp::check_report_json(rep, tolerance));
  if (!junit.empty()) outputs.emplace_back(junit, sp::check_report_junit(rep, tolerance));
  sp::write_files_atomically(outputs);
  return rep.n_failed == 0 ? 0 : 1;
}

// The whole command line; an error ends it with its exit code and `message` (printed once by
// main, under MPI by one rank only).
int run_cli(int argc, char** argv, std::string& message) {
  CLI::App app{"stillpoint: Kohn-Sham solutions, exact gradients and fits for density-functional development.\n"
               "All quantities in hartree atomic units (energies in hartree, lengths in bohr).\n"
               "Exit status: 0 ok, 1 values outside tolerance, 2 input error, 3 numerical failure, 4 internal error, 5 output could not be written."};
  app.require_subcommand(1);
  app.set_version_flag("--version", "stillpoint 0.1.0");

  std::string solve_file, out_dir;
  bool verbose = false;
  auto* solve = app.add_subcommand("solve", "Self-consistent Kohn-Sham solution of the systems in an input file");
  solve->add_option("input", solve_file, "input file (TOML), see docs/input.md")->required()->check(CLI::ExistingFile);
  solve->add_option("--output,-o", out_dir,
                    "write NAME.json, NAME_density.csv and NAME_potentials.csv for every system into this directory "
                    "(only when all systems succeed)");
  solve->add_flag("--verbose,-v", verbose, "print every SCF iteration");
  bool solve_quiet = false;
  solve->add_flag("--quiet,-q", solve_quiet, "no progress lines");

  std::vector<std::string> tables;
  double tolerance = 1e-6;
  std::string report, junit, grid = "default";
  bool quiet = false;
  auto* check = app.add_subcommand("check", "Regression check of atoms against reference tables (long CSV format)");
  check->add_option("tables", tables, "reference tables")->required()->expected(1, -1)->check(CLI::ExistingFile);
  check->add_option("--tolerance", tolerance, "allowed |computed - reference| in hartree (default 1e-6)")
      ->check(positive_finite());
  check->add_option("--report", report, "write a JSON report here");
  check->add_option("--junit", junit, "write a JUnit XML report here");
  check->add_option("--grid", grid, "grid preset for every atom (coarse, default, tight)");
  check->add_flag("--quiet,-q", quiet, "no progress lines");

  GradCommandOptions gopt;
  auto* grad = app.add_subcommand("grad", "Loss and exact gradient by implicit differentiation of the converged SCF");
  grad->add_option("input", gopt.input, "input file (TOML) with [[system]], [[parameter]] and [[loss]], see docs/grad.md")
      ->required()
      ->check(CLI::ExistingFile);
  grad->add_option("--mode", gopt.mode, "adjoint (one solve per system) or tangent (one solve per parameter)")
      ->check(CLI::IsMember({"adjoint", "tangent"}));
  grad->add_flag("--verify", gopt.verify,
                 "compare every component with central finite differences of the whole converged program; exit 1 on "
                 "disagreement");
  grad->add_option("--verify-tolerance", gopt.verify_tolerance, "relative tolerance of --verify (default 1e-6)")
      ->check(positive_finite());
  grad->add_option("--output,-o", gopt.output, "write grad.json (and CSV gradient fields for grid potentials) here");
  grad->add_flag("--quiet,-q", gopt.quiet, "no progress lines");

  ExactCommandOptions eopt;
  auto* exact = app.add_subcommand("exact", "Exact one- and two-electron 1D references (energies, densities, exact v_s)");
  exact->add_option("input", eopt.input, "input file (TOML), see docs/exact.md")->required()->check(CLI::ExistingFile);
  exact->add_option("--output,-o", eopt.output, "write JSON and CSV results (batch mode: a folder with a manifest) here");
  exact->add_flag("--quiet,-q", eopt.quiet, "no progress lines");

  InvertCommandOptions iopt;
  auto* invert = app.add_subcommand("invert", "Kohn-Sham inversion: the v_s and v_xc behind a given density");
  invert->add_option("input", iopt.input, "input file (TOML), see docs/invert.md")->required()->check(CLI::ExistingFile);
  invert->add_option("--output,-o", iopt.output, "write JSON, CSV and plots here");
  invert->add_flag("--quiet,-q", iopt.quiet, "no progress lines");

  FitCommandOptions fopt;
  auto* fit = app.add_subcommand("fit", "Fit model functionals or potentials to reference data");
  fit->add_option("input", fopt.input, "workflow file (TOML), see docs/fit.md")->required()->check(CLI::ExistingFile);
  fit->add_option("--output,-o", fopt.output, "write the report, fitted model, tables and plots here");
  fit->add_flag("--resume", fopt.resume, "continue from the checkpoint in the output directory");
  fit->add_option("--threads", fopt.threads, "systems evaluated in parallel (default: from the workflow file)")
      ->check(CLI::Range(1, 1000000000));
  fit->add_flag("--quiet,-q", fopt.quiet, "no progress lines");

  FunctionalsCommandOptions xopt;
  auto* functionals = app.add_subcommand(
      "functionals", "List the libxc functionals and whether each can be used; --survey solves with each of them");
  functionals->add_option("--survey", xopt.survey,
                          "solve a set of systems with every usable LDA/GGA: ne, docs, quick, atoms, lines, all");
  functionals->add_option("--only", xopt.only, "restrict to these libxc names or numbers");
  functionals->add_option("--markdown", xopt.markdown, "write the survey as a Markdown table (docs/functionals.md)");
  functionals->add_option("--energies-of", xopt.energies_of,
                          "systems whose energies the Markdown table shows, e.g. Ne \"line He\" (default: all)");
  functionals->add_option("--threads", xopt.threads, "functionals surveyed in parallel")->check(CLI::Range(1, 256));
  functionals->add_flag("--quiet,-q", xopt.quiet, "no progress lines");

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int rc = app.exit(e);
    return rc == 0 ? 0 : 2;
  }
  try {
    if (*solve) return run_solve(solve_file, out_dir, verbose, solve_quiet);
    if (*check) return run_check(tables, tolerance, report, junit, grid, quiet);
    if (*grad) {
      if (!std::isfinite(gopt.verify_tolerance))
        throw sp::InputError("--verify-tolerance must be a positive finite number, not " + format_g(gopt.verify_tolerance));
      check_output_dir(gopt.output);
      return run_grad(gopt);
    }
    if (*exact) {
      check_output_dir(eopt.output);
      return run_exact(eopt);
    }
    // One inversion, and a survey that shares its functionals over threads, are not shared
    // over ranks: rank 0 does them and the others wait, rather than all writing the same files.
    if ((*invert || *functionals) && ranks().size() > 1) {
      if (ranks().rank() != 0) return 0;
      std::cerr << "stillpoint: " << (*invert ? "invert" : "functionals") << " is not shared over MPI ranks; rank 0 runs it and the other "
                << ranks().size() - 1 << " wait (docs/mpi.md)\n";
    }
    if (*invert) {
      check_output_dir(iopt.output);
      return run_invert(iopt);
    }
    if (*functionals) return run_functionals(xopt);
    if (*fit) {
      check_output_dir(fopt.output);
      return run_fit(fopt);
    }
  } catch (const sp::InputError& e) {
    message = std::string("stillpoint: input error: ") + e.what() + "\n";
    return 2;
  } catch (const sp::NumericalError& e) {
    message = std::string("stillpoint: numerical failure: ") + e.what() + "\n";
    for (const auto& d : e.details()) message += d + "\n";
    return 3;
  } catch (const sp::OutputError& e) {
    message = std::string("stillpoint: output could not be written: ") + e.what() + "\n";
    return 5;
  } catch (const std::exception& e) {
    message = std::string("stillpoint: internal error (please report): ") + e.what() + "\n";
    return 4;
  }
  return 0;
}

const sp::Communicator* g_ranks = &sp::serial_communicator();

}  // namespace

const sp::Communicator& ranks() { return *g_ranks; }

int main(int argc, char** argv) {
  openblas_set_num_threads(1);
  std::string message;
#ifdef STILLPOINT_HAVE_MPI
  // Started by mpirun: every rank runs the same command on its share of the work; rank 0 alone
  // prints results and writes files (docs/mpi.md).
  sp::MpiSession mpi(argc, argv);
  g_ranks = &mpi.world();
  int err_fd = STDERR_FILENO;
  if (mpi.world().rank() != 0) {
    err_fd = ::dup(STDERR_FILENO);
    const int null = ::open("/dev/null", O_WRONLY);
    if (null >= 0) {
      ::dup2(null, STDOUT_FILENO);
      ::dup2(null, STDERR_FILENO);
      ::close(null);
    }
  }
  const int code = run_cli(argc, argv, message);
  std::cout.flush();
  std::cerr.flush();
  return mpi.finish(code, message, err_fd);
#else
  const int code = run_cli(argc, argv, message);
  std::cerr << message;
  return code;
#endif
}
