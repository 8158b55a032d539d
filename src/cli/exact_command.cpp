// `stillpoint exact FILE.toml`: exact one- and two-electron references on the line
// (energies, densities, exact Kohn–Sham potentials), one system or a batch family.
// Input and output formats: docs/exact.md.
//
// Like `solve`, the run is all-or-nothing: every system (every batch member) is read and
// checked first, then solved, and only when all have succeeded are the files written, each
// atomically.
#include <cstdio>
#include <iostream>

#include "commands.hpp"
#include "stillpoint/common/atomic_file.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/exact/two_electron.hpp"

namespace sp = stillpoint;

int run_exact(const ExactCommandOptions& o) {
  const sp::ExactInput in = sp::read_exact_input(o.input);
  for (const auto& w : in.warnings) std::cerr << "stillpoint: warning: " << w << "\n";
  const bool batch = !in.batch_values.empty();
  const std::size_t n = in.systems.size();
  const std::vector<sp::ExactResult> results = sp::solve_exact_systems(in, ranks(), [&](int i) {
    if (!o.quiet) std::cerr << "  exact [" << i + 1 << "/" << n << "] " << in.systems[i].name << " ...\n";
  });
  if (!batch)
    for (const sp::ExactResult& r : results) std::cout << sp::format_exact_result(r) << "\n";
  if (batch) {
    std::string params;
    for (const auto& p : in.batch_parameters) params += (params.empty() ? "" : ", ") + p;
    std::printf("batch over %s: %zu systems (energies in hartree)\n", params.c_str(), results.size());
    std::printf("  %-28s %14s %18s %16s %12s\n", "name", "value", "energy (Ha)", "HOMO (Ha)", "grid est. (Ha)");
    for (std::size_t i = 0; i < results.size(); ++i) {
      const sp::ExactResult& r = results[i];
      char est[32] = "-";
      if (r.grid_error_estimate) std::snprintf(est, sizeof est, "%.1e", *r.grid_error_estimate);
      std::printf("  %-28s %14.8g %18.10f %16.10f %12s\n", r.spec.name.c_str(), in.batch_values[i], r.energy.total, r.ks.homo,
                  est);
    }
  }
  if (!o.output.empty() && writes_files()) {
    const auto files = sp::exact_output_files(in, results, o.output);
    std::vector<std::pair<std::string, std::string>> set;  // all files or none
    for (const auto& [name, content] : files) set.emplace_back(o.output + "/" + name, content);
    sp::write_files_atomically(set);
    if (!o.quiet) std::cerr << "  wrote " << files.size() << " files to " << o.output << " (manifest.toml lists them)\n";
  }
  return 0;
}
