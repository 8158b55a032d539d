#pragma once
// Regression checks against tables of reference atomic data in the long CSV format
//   Z,symbol,charge,configuration,approximation,quantity,value
// ('#' starts a comment line). approximation LDA = spin-unpolarized, LSD = spin-polarized, both
// Slater exchange + VWN correlation (libxc lda_x + lda_c_vwn). Quantities (hartree): Etot,
// Ekin, Ecoul (Hartree energy), Eenuc, Exc, eigenvalues eps_<nl>; LSD eigenvalues carry
// _up / _down with the convention of NIST SRD 141: _down is the majority spin.
#include <functional>
#include <string>
#include <vector>

#include "stillpoint/ks/scf.hpp"
#include "stillpoint/parallel/communicator.hpp"

namespace stillpoint {

struct ReferenceRow {
  int Z = 0;
  std::string symbol;
  int charge = 0;
  std::string configuration;
  std::string approximation;
  std::string quantity;
  double value = 0.0;
  std::string file;
  int line = 0;
};

/// Reads one table; InputError names file, line and column for anything malformed.
std::vector<ReferenceRow> read_reference_table(const std::string& path);

struct CheckOptions {
  /// |computed - reference| allowed, hartree.
  double tolerance = 1e-6;
  /// Grid preset used for every atom.
  std::string grid = "default";
  ScfOptions scf;
  /// Called with one line per finished (Z, charge, approximation) group.
  std::function<void(const std::string&)> progress;
  /// The ranks the atoms are shared out over (the report is the same on every rank and equal
  /// to a serial run's); nullptr: this process alone. Not owned.
  const Communicator* communicator = nullptr;
};

struct CheckResult {
  ReferenceRow row;
  double computed = 0.0;
  double deviation = 0.0;  ///< computed - reference
  bool passed = false;
};

struct CheckReport {
  std::vector<CheckResult> results;
  int n_checked = 0;
  int n_failed = 0;
  double max_abs_deviation = 0.0;
  double seconds = 0.0;
};

/// Runs every (Z, charge, approximation) group of the rows once and compares each quantity.
/// Throws InputError for unknown quantities or approximations, NumericalError if an SCF fails.
CheckReport run_reference_check(const std::vector<ReferenceRow>& rows, const CheckOptions& options);

std::string format_check_table(const CheckReport& report, double tolerance);
std::string check_report_json(const CheckReport& report, double tolerance);
std::string check_report_junit(const CheckReport& report, double tolerance);

}  // namespace stillpoint
