// stillpoint command line: a thin layer over the library.
//   exit 0  success
//   exit 1  a check or verification found values outside tolerance
//   exit 2  unusable input (file, key, value)
//   exit 3  numerical failure (for example an SCF that did not converge)
#include <CLI/CLI.hpp>
#include <cstdio>
#include <iostream>

#include "stillpoint/atomic_file.hpp"
#include "stillpoint/errors.hpp"
#include "stillpoint/input.hpp"
#include "stillpoint/reference_check.hpp"
#include "stillpoint/solution_report.hpp"

namespace sp = stillpoint;

// OpenBLAS's own threads only add contention for the small banded problems solved here.
extern "C" void openblas_set_num_threads(int);

namespace {

int run_solve(const std::string& file, const std::string& out_dir, bool verbose) {
  sp::SolveInput in = sp::read_solve_input(file);
  if (verbose) in.scf.verbose = true;
  for (const auto& spec : in.systems) {
    sp::KsProblem problem(spec);
    problem.set_density_threshold(in.density_threshold);
    const sp::KsSolution sol = sp::solve_scf(problem, in.scf);
    std::cout << sp::format_solution(problem, sol) << std::flush;
    if (!out_dir.empty()) {
      sp::write_solution_files(out_dir, problem, sol);
      std::cout << "  wrote " << out_dir << "/" << spec.name << "{.json,_density.csv,_potentials.csv}\n";
    }
  }
  return 0;
}

int run_check(const std::vector<std::string>& tables, double tolerance, const std::string& report,
              const std::string& junit, const std::string& grid, bool quiet) {
  std::vector<sp::ReferenceRow> rows;
  for (const auto& t : tables) {
    auto r = sp::read_reference_table(t);
    rows.insert(rows.end(), r.begin(), r.end());
  }
  sp::CheckOptions opt;
  opt.tolerance = tolerance;
  opt.grid = grid;
  if (!quiet) opt.progress = [](const std::string& s) { std::cerr << "  done: " << s << "\n"; };
  const sp::CheckReport rep = sp::run_reference_check(rows, opt);
  std::cout << sp::format_check_table(rep, tolerance);
  if (!report.empty()) sp::write_file_atomically(report, sp::check_report_json(rep, tolerance));
  if (!junit.empty()) sp::write_file_atomically(junit, sp::check_report_junit(rep, tolerance));
  return rep.n_failed == 0 ? 0 : 1;
}

}  // namespace

int main(int argc, char** argv) {
  openblas_set_num_threads(1);
  CLI::App app{"stillpoint: Kohn-Sham solutions, exact gradients and fits for density-functional development.\n"
               "All quantities in hartree atomic units (energies in hartree, lengths in bohr)."};
  app.require_subcommand(1);
  app.set_version_flag("--version", "stillpoint 0.1.0");

  std::string solve_file, out_dir;
  bool verbose = false;
  auto* solve = app.add_subcommand("solve", "Self-consistent Kohn-Sham solution of the systems in an input file");
  solve->add_option("input", solve_file, "input file (TOML), see docs/input.md")->required()->check(CLI::ExistingFile);
  solve->add_option("--output,-o", out_dir, "write NAME.json and CSV files of density and potentials into this directory");
  solve->add_flag("--verbose,-v", verbose, "print every SCF iteration");

  std::vector<std::string> tables;
  double tolerance = 1e-6;
  std::string report, junit, grid = "default";
  bool quiet = false;
  auto* check = app.add_subcommand("check", "Regression check of atoms against reference tables (long CSV format)");
  check->add_option("tables", tables, "reference tables")->required()->expected(1, -1)->check(CLI::ExistingFile);
  check->add_option("--tolerance", tolerance, "allowed |computed - reference| in hartree (default 1e-6)")
      ->check(CLI::PositiveNumber);
  check->add_option("--report", report, "write a JSON report here");
  check->add_option("--junit", junit, "write a JUnit XML report here");
  check->add_option("--grid", grid, "grid preset for every atom (coarse, default, tight)");
  check->add_flag("--quiet,-q", quiet, "no progress lines");

  try {
    app.parse(argc, argv);
  } catch (const CLI::ParseError& e) {
    const int rc = app.exit(e);
    return rc == 0 ? 0 : 2;
  }
  try {
    if (*solve) return run_solve(solve_file, out_dir, verbose);
    if (*check) return run_check(tables, tolerance, report, junit, grid, quiet);
  } catch (const sp::InputError& e) {
    std::cerr << "stillpoint: input error: " << e.what() << "\n";
    return 2;
  } catch (const sp::NumericalError& e) {
    std::cerr << "stillpoint: numerical failure: " << e.what() << "\n";
    for (const auto& d : e.details()) std::cerr << d << "\n";
    return 3;
  } catch (const std::exception& e) {
    std::cerr << "stillpoint: internal error (please report): " << e.what() << "\n";
    return 4;
  }
  return 0;
}
