#include "stillpoint/check/functional_survey.hpp"

#include <xc.h>

#include <algorithm>
#include <atomic>
#include <memory>
#include <cstdio>
#include <sstream>
#include <thread>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/scf.hpp"

namespace stillpoint {

namespace {

SurveySystem atom(int Z, bool polarized) {
  static const char* symbols[] = {"", "H", "He", "Li", "Be", "B", "C", "N", "O", "F", "Ne", "Na", "Mg", "Al", "Si",
                                  "P", "S", "Cl", "Ar", "K", "Ca", "Sc", "Ti", "V", "Cr", "Mn", "Fe", "Co", "Ni",
                                  "Cu", "Zn", "Ga", "Ge", "As", "Se", "Br", "Kr"};
  SurveySystem s;
  s.label = std::string(symbols[Z]) + (polarized ? " (polarized)" : "");
  s.spec.name = s.label;
  s.spec.geometry = Geometry::Radial;
  s.spec.atom.Z = Z;
  s.spec.atom.configuration = parse_configuration(default_configuration(Z, 0));
  s.spec.spin_polarized = polarized;
  s.spec.grid = grid_preset(Geometry::Radial, "default");
  return s;
}

// Soft-Coulomb line atoms with the usual softening 1 for nucleus and interaction (common practice).
SurveySystem line(double Z, bool polarized) {
  static const char* names[] = {"", "H", "He", "Li", "Be"};
  SurveySystem s;
  s.label = std::string("line ") + names[static_cast<int>(Z)] + (polarized ? " (polarized)" : "");
  s.spec.name = s.label;
  s.spec.geometry = Geometry::Line;
  s.spec.line.nuclei = {{Z, 0.0, 1.0}};
  s.spec.spin_polarized = polarized;
  s.spec.grid = grid_preset(Geometry::Line, "default");
  return s;
}

bool usable_kind(const LibxcEntry& e) {
  return (e.family == "LDA" || e.family == "GGA") && e.kind != "kinetic";
}

}  // namespace

bool SurveyRow::all_converged() const {
  return refusal.empty() && std::all_of(outcomes.begin(), outcomes.end(), [](const auto& o) { return o.acceptable(); });
}

bool SurveyRow::any_unstable() const {
  return std::any_of(outcomes.begin(), outcomes.end(), [](const auto& o) { return o.unstable; });
}

std::vector<SurveySystem> survey_systems(const std::string& set) {
  std::vector<SurveySystem> out;
  const bool atoms = set == "atoms" || set == "all", lines = set == "lines" || set == "all";
  if (set == "ne" || set == "docs") out.push_back(atom(10, false));
  if (set == "docs") out.push_back(line(2, false));
  if (set == "quick")
    for (auto [Z, pol] : {std::pair{2, false}, {7, true}, {10, false}, {18, false}}) out.push_back(atom(Z, pol));
  if (atoms)
    for (int Z : {1, 2, 3, 7, 10, 11, 18, 36})
      for (bool pol : {false, true}) out.push_back(atom(Z, pol));
  if (lines)
    for (int Z : {1, 2, 3, 4})
      for (bool pol : {false, true}) out.push_back(line(Z, pol));
  if (out.empty())
    throw InputError("unknown survey set '" + set + "'; use one of ne, docs, quick, atoms, lines, all");
  return out;
}

SurveyRow survey_functional(const LibxcEntry& entry, const std::vector<SurveySystem>& systems) {
  SurveyRow row;
  row.entry = entry;
  std::string refusal_3d = libxc_refusal(entry.id, false), refusal_1d = libxc_refusal(entry.id, true);
  bool any = false;
  for (const SurveySystem& sys : systems) {
    const bool one_d = sys.spec.geometry == Geometry::Line;
    if (!(one_d ? refusal_1d : refusal_3d).empty()) continue;
    any = true;
    SystemSpec spec = sys.spec;
    spec.xc = {entry.name};
    if (entry.kind == "correlation") spec.xc.insert(spec.xc.begin(), one_d ? "lda_x_1d_soft" : "lda_x");
    if (row.xc.empty()) row.xc = spec.xc;
    SurveyOutcome o;
    o.system = sys.label;
    std::unique_ptr<KsProblem> built;
    try {
      built = std::make_unique<KsProblem>(spec);
    } catch (const InputError& e) {
      o.refused = true;
      o.error = e.what();
      row.outcomes.push_back(std::move(o));
      continue;
    }
    try {
      const KsProblem& problem = *built;
      const XcFunctional& f = problem.xc();
      row.tail_cut = f.term(f.size() - 1).tail_cut();
      row.tail_on = f.term(f.size() - 1).tail_on();
      const KsSolution sol = solve_scf(problem);
      o.converged = true;
      o.iterations = sol.iterations;
      o.energy = sol.energy.total;
      o.residual_floor = sol.residual_floor;
    } catch (const UnstableFunctionalError& e) {
      o.unstable = true;
      o.stability = e.stability();
      o.error = e.what();
    } catch (const std::exception& e) {
      o.error = e.what();
    }
    row.outcomes.push_back(std::move(o));
  }
  if (!any) {
    // Name the reason that applies to the systems asked for.
    const bool has3d = std::any_of(systems.begin(), systems.end(), [](const auto& s) { return s.spec.geometry == Geometry::Radial; });
    row.refusal = has3d ? refusal_3d : refusal_1d;
  }
  return row;
}

std::vector<SurveyRow> survey_libxc(const std::vector<SurveySystem>& systems, const std::vector<std::string>& only,
                                    const SurveyOptions& options) {
  std::vector<LibxcEntry> entries;
  for (const LibxcEntry& e : libxc_catalog()) {
    if (!only.empty()) {
      const bool wanted = std::any_of(only.begin(), only.end(), [&](const std::string& w) {
        return w == e.name || w == std::to_string(e.id);
      });
      if (!wanted) continue;
    }
    entries.push_back(e);
  }
  if (!only.empty() && entries.size() < only.size()) {
    for (const std::string& w : only)
      if (std::none_of(entries.begin(), entries.end(), [&](const auto& e) { return w == e.name || w == std::to_string(e.id); }))
        throw InputError("libxc has no functional '" + w + "'");
  }
  std::vector<SurveyRow> rows(entries.size());
  std::atomic<std::size_t> next{0};
  std::vector<char> done(entries.size(), 0);
  auto work = [&]() {
    for (std::size_t i = next++; i < entries.size(); i = next++) {
      if (usable_kind(entries[i]))
        rows[i] = survey_functional(entries[i], systems);
      else {
        rows[i].entry = entries[i];
        rows[i].refusal = libxc_refusal(entries[i].id, systems.front().spec.geometry == Geometry::Line);
      }
    }
  };
  const int nt = std::max(1, options.threads);
  if (nt == 1 || !options.progress) {
    std::vector<std::thread> pool;
    for (int t = 1; t < nt; ++t) pool.emplace_back(work);
    work();
    for (auto& t : pool) t.join();
    if (options.progress)
      for (const auto& r : rows) options.progress(r);
  } else {
    std::vector<std::thread> pool;
    for (int t = 0; t < nt; ++t) pool.emplace_back(work);
    for (auto& t : pool) t.join();
    for (const auto& r : rows) options.progress(r);
  }
  return rows;
}

std::string survey_markdown(const std::vector<SurveyRow>& rows, const std::string& set,
                            const std::vector<std::string>& energies_of) {
  auto shown = [&](const std::string& system) {
    return energies_of.empty() || std::find(energies_of.begin(), energies_of.end(), system) != energies_of.end();
  };
  std::vector<std::string> systems;
  for (const auto& r : rows)
    for (const auto& o : r.outcomes)
      if (std::find(systems.begin(), systems.end(), o.system) == systems.end()) systems.push_back(o.system);
  std::string listed, energies;
  for (const auto& x : systems) {
    listed += (listed.empty() ? "" : ", ") + x;
    if (shown(x)) energies += (energies.empty() ? "" : ", ") + x;
  }
  std::ostringstream s;
  int solved = 0, refused = 0, failed = 0, unstable = 0;
  for (const auto& r : rows) {
    (r.refusal.empty() ? (r.all_converged() ? solved : failed) : refused)++;
    if (r.refusal.empty() && r.all_converged() && r.any_unstable()) ++unstable;
  }
  s << "# libxc functionals in stillpoint\n\n"
    << "Generated by `tools/dev functionals` (`stillpoint functionals --survey " << set
    << [&] {
         std::string flag = energies_of.empty() ? "" : " --energies-of";
         for (const auto& x : energies_of) flag += x.find(' ') == std::string::npos ? " " + x : " \"" + x + "\"";
         return flag;
       }()
    << " --markdown docs/functionals.md`) with libxc " << xc_version_string()
    << "; do not edit by hand. Every functional of the installed libxc is listed by number. "
       "A usable one was solved self-consistently with every default setting (default grid, "
       "default SCF options) on the survey's systems; a correlation-only functional is paired with "
       "Slater exchange (`lda_x`). Systems: "
    << listed << ". Results show the total energy (hartree) and SCF iterations for " << energies
    << "; every failure, refusal for a system, or instability on any system is listed in the status.\n\n"
    << "A functional marked *unstable* on a system failed there because its best SCF iterate breaks the "
       "ripple-stability bound: where 4 n d2e/dn'2 < -1 (e the exchange-correlation energy per volume, n' "
       "the density gradient), short-wavelength density ripples lower the exchange-correlation energy "
       "faster than the von Weizsaecker bound of the kinetic energy raises it, so no self-consistent "
       "minimum exists and no setting changes that (docs/input.md).\n\n"
    << "Summary: " << solved << " converge (" << unstable << " of them unstable on some systems), " << refused
    << " are refused before the SCF starts, " << failed << " fail.\n\n";
  s << "| # | name | description | family | kind | status | results (total energy, SCF iterations) |\n"
    << "|---|---|---|---|---|---|---|\n";
  auto esc = [](std::string t) {
    std::string o;
    for (char c : t) {
      if (c == '|') o += "\\|";
      else if (c == '\n') o += ' ';
      else o += c;
    }
    return o;
  };
  for (const auto& r : rows) {
    s << "| " << r.entry.id << " | `" << r.entry.name << "` | " << esc(r.entry.description) << " | " << r.entry.family
      << " | " << r.entry.kind << " | ";
    if (!r.refusal.empty()) {
      std::string why = r.refusal;
      if (const auto p = why.find(") "); p != std::string::npos && why.rfind("functional '", 0) == 0) why = why.substr(p + 2);
      s << "refused: " << esc(why) << " | | |\n";
      continue;
    }
    std::string results, errors, refused_on, refused_why, unstable_on;
    for (const auto& o : r.outcomes) {
      if (o.converged) {
        if (!shown(o.system)) continue;
        char b[96];
        if (o.residual_floor > 0.0)
          std::snprintf(b, sizeof b, "%.6f Ha (%d, at its rounding floor %.0e Ha)", o.energy, o.iterations, o.residual_floor);
        else
          std::snprintf(b, sizeof b, "%.6f Ha (%d)", o.energy, o.iterations);
        results += (results.empty() ? "" : ", ") + o.system + " " + b;
      } else if (o.unstable) {
        char b[128];
        std::snprintf(b, sizeof b, " (%.2f at %s = %.2g bohr)", o.stability.worst, o.system.rfind("line", 0) == 0 ? "x" : "r",
                      o.stability.x);
        unstable_on += (unstable_on.empty() ? "" : ", ") + o.system + b;
      } else if (o.refused) {
        refused_on += (refused_on.empty() ? "" : ", ") + o.system;
        if (refused_why.empty()) {
          refused_why = o.error;
          if (const auto p = refused_why.find(": functional '"); p != std::string::npos) refused_why = refused_why.substr(p + 2);
          if (const auto p = refused_why.find(") "); p != std::string::npos && refused_why.rfind("functional '", 0) == 0)
            refused_why = refused_why.substr(p + 2);
        }
      } else {
        errors += (errors.empty() ? "" : "; ") + o.system + ": " + o.error.substr(0, 160);
      }
    }
    std::string status = !errors.empty()        ? "FAILS: " + esc(errors)
                         : unstable_on.empty() ? "converges"
                                               : "*unstable* on " + esc(unstable_on) + "; converges on the other systems";
    if (!refused_on.empty()) status += "; refused on " + esc(refused_on) + ": " + esc(refused_why);
    if (r.tail_cut > 0) {
      char b[96];
      std::snprintf(b, sizeof b, " (switched off below n = %.0e, where its tail is unusable; fully on above %.0e)",
                    r.tail_cut, r.tail_on);
      status += b;
    }
    s << status << " | " << esc(results) << " |\n";
  }
  return s.str();
}

}  // namespace stillpoint
