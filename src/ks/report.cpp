#include "stillpoint/ks/report.hpp"

#include <cmath>
#include <cstdio>
#include <nlohmann/json.hpp>
#include <sstream>

#include "common/format.hpp"
#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/common/atomic_file.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/xc_terms.hpp"

namespace stillpoint {

namespace {

std::string spin_name(const KsProblem& P, int spin) {
  if (P.nspin() == 1) return "both";
  return spin == 0 ? "up" : "down";
}

std::string fmt(const char* f, double v) { return detail::printf_number(f, v); }

std::string system_line(const KsProblem& P) {
  const SystemSpec& s = P.spec();
  std::ostringstream o;
  if (s.geometry == Geometry::Radial) {
    o << "atom " << element_symbol(s.atom.Z) << " (Z = " << s.atom.Z << "), charge " << s.charge << ", configuration "
      << format_configuration(s.atom.configuration) << ", " << (s.spin_polarized ? "spin-polarized" : "spin-unpolarized");
  } else {
    o << "line, " << s.line.nuclei.size() << (s.line.nuclei.size() == 1 ? " nucleus, " : " nuclei, ") << P.electron_count()
      << (P.electron_count() == 1.0 ? " electron, " : " electrons, ")
      << (s.spin_polarized ? "spin-polarized" : "spin-unpolarized")
      << (s.line.interacting ? ", soft-Coulomb interaction a = " + fmt("%g", s.line.electron_softening) + " bohr"
                             : ", non-interacting");
  }
  return o.str();
}

bool interacting(const KsProblem& P) { return P.spec().geometry == Geometry::Radial || P.spec().line.interacting; }

/// The functional as the input writes it; without terms, what is left of the interaction.
std::string functional_text(const KsProblem& P) {
  if (!P.xc().empty()) return xc_list_form(P.xc());
  return interacting(P) ? "none (Hartree only)" : "none (non-interacting: no Hartree or exchange-correlation term)";
}

void require_finite(const Eigen::VectorXd& v, const std::string& what) {
  if (!v.allFinite()) throw NumericalError("refusing to write " + what + ": it contains NaN or Inf");
}

}  // namespace

std::string format_solution(const KsProblem& P, const KsSolution& S) {
  std::ostringstream o;
  const bool radial = P.mesh().geometry() == Geometry::Radial;
  o << "system " << P.spec().name << ": " << system_line(P) << "\n";
  o << "  functional  " << functional_text(P) << "\n";
  o << "  grid        " << P.spec().grid_name << ": " << P.mesh().describe() << "\n";
  o << "  SCF         converged in " << S.iterations << " iterations (potential residual "
    << fmt("%.2e", S.history.empty() ? 0.0 : S.history.back().residual) << " Ha)\n";
  if (S.residual_floor > 0.0)
    o << "              at the rounding floor of the Kohn-Sham map (" << fmt("%.2e", S.residual_floor)
      << " Ha, measured): the functional turns rounding-level density changes into larger potential changes\n";
  o << "  energies (hartree)\n";
  auto line = [&](const char* name, double v) { o << "    " << name << fmt("%20.10f", v) << "\n"; };
  line("total                ", S.energy.total);
  line("kinetic              ", S.energy.kinetic);
  line(radial ? "electron-nucleus     " : "external             ", S.energy.external);
  line("hartree              ", S.energy.hartree);
  line("exchange-correlation ", S.energy.xc);
  // Each term of the sum on its own (weights included), so exchange and correlation can be
  // compared separately.
  for (const XcTermEnergy& t : xc_term_energies(P, S.density)) {
      char buf[160];
      std::snprintf(buf, sizeof buf, "      %-19s%20.10f  (%s)\n", t.name.c_str(), t.energy, t.kind.c_str());
      o << buf;
    }
  if (!radial) line("nucleus-nucleus      ", S.energy.nuclear_repulsion);
  o << "  levels (hartree)\n    state  spin  occupation          energy\n";
  for (const Level& lv : S.levels) {
    char buf[128];
    std::snprintf(buf, sizeof buf, "    %-5s  %-4s  %10.6f  %14.9f%s\n", lv.label.c_str(), spin_name(P, lv.spin).c_str(),
                  lv.occupation, lv.energy, lv.settled ? "" : "  (did not settle: unoccupied, felt by no electron)");
    o << buf;
  }
  return o.str();
}

std::string solution_json(const KsProblem& P, const KsSolution& S) {
  using nlohmann::json;
  const SystemSpec& s = P.spec();
  json j;
  j["units"] = {{"energy", "hartree"}, {"length", "bohr"}};
  j["system"] = {{"name", s.name},
                 {"kind", s.geometry == Geometry::Radial ? "atom" : "line"},
                 {"description", system_line(P)},
                 {"electrons", P.electron_count()},
                 {"charge", s.charge},
                 {"spin", s.spin_polarized ? "polarized" : "unpolarized"}};
  if (s.geometry == Geometry::Radial) {
    j["system"]["Z"] = s.atom.Z;
    j["system"]["element"] = element_symbol(s.atom.Z);
    j["system"]["configuration"] = format_configuration(s.atom.configuration);
  }
  j["functional"] = functional_text(P);
  j["grid"] = {{"preset", s.grid_name}, {"description", P.mesh().describe()}, {"nodes", P.mesh().num_nodes()}};
  const EnergyParts& E = S.energy;
  for (double v : {E.total, E.kinetic, E.external, E.hartree, E.xc, E.nuclear_repulsion, E.band})
    if (!std::isfinite(v)) throw NumericalError("refusing to write a non-finite energy");
  j["energy"] = {{"total", E.total},     {"kinetic", E.kinetic}, {"external", E.external},
                 {"hartree", E.hartree}, {"xc", E.xc},           {"nuclear_repulsion", E.nuclear_repulsion},
                 {"band", E.band}};
  json levels = json::array();
  for (const Level& lv : S.levels)
    levels.push_back({{"label", lv.label},
                      {"spin", spin_name(P, lv.spin)},
                      {"l", lv.l},
                      {"occupation", lv.occupation},
                      {"energy", lv.energy},
                      {"settled", lv.settled}});
  j["levels"] = levels;
  // Per term of the XC sum, and the exchange and correlation parts they add up to.
  json terms = json::array();
  double ex = 0.0, ec = 0.0;
  bool split = true;  // only when every term is pure exchange or pure correlation
  for (const XcTermEnergy& t : xc_term_energies(P, S.density)) {
    terms.push_back({{"name", t.name}, {"weight", t.weight}, {"kind", t.kind}, {"energy", t.energy}});
    if (t.kind == "exchange") ex += t.energy;
    else if (t.kind == "correlation") ec += t.energy;
    else split = false;
  }
  j["xc_terms"] = terms;
  if (split) {
    j["energy"]["exchange"] = ex;
    j["energy"]["correlation"] = ec;
  }
  json hist = json::array();
  for (const ScfStep& st : S.history)
    hist.push_back({{"iteration", st.iteration}, {"energy", st.energy}, {"residual", st.residual}});
  j["scf"] = {{"converged", true}, {"iterations", S.iterations}, {"history", hist}};
  // 0: the tolerances were met as asked; otherwise the measured rounding floor the SCF stopped at.
  j["scf"]["residual_floor"] = S.residual_floor;
  return j.dump(2) + "\n";
}

void write_solution_files(const std::string& dir, const KsProblem& P, const KsSolution& S) {
  const Mesh& m = P.mesh();
  const bool radial = m.geometry() == Geometry::Radial;
  const int ns = P.nspin();
  for (int s = 0; s < ns; ++s) {
    require_finite(S.density[s], "the density");
    require_finite(S.v_s[s], "v_s");
    require_finite(S.v_xc[s], "v_xc");
  }
  require_finite(S.v_h, "v_H");
  const std::string json_text = solution_json(P, S);
  std::ostringstream d, v;
  const char* xname = radial ? "r_bohr" : "x_bohr";
  const char* nunit = radial ? "per_bohr3" : "per_bohr";
  d << "# " << P.spec().name << ": density on the grid nodes; " << (radial ? "r" : "x") << " in bohr, density in electrons/"
    << (radial ? "bohr^3" : "bohr") << "\n";
  d << xname << ",n_" << nunit;
  if (ns == 2) d << ",n_up_" << nunit << ",n_down_" << nunit;
  d << ",quadrature_weight\n";
  v << "# " << P.spec().name << ": potentials on the grid nodes in hartree\n";
  v << xname << ",v_ext_hartree,v_h_hartree";
  if (ns == 1)
    v << ",v_xc_hartree,v_s_hartree\n";
  else
    v << ",v_xc_up_hartree,v_xc_down_hartree,v_s_up_hartree,v_s_down_hartree\n";
  const Eigen::VectorXd n = S.total_density();
  char buf[64];
  auto num = [&](double x) {
    std::snprintf(buf, sizeof buf, "%.12e", x);
    return std::string(buf);
  };
  // The r = 0 node carries no quadrature weight and the potentials are singular there.
  for (int k = radial ? 1 : 0; k < m.num_nodes(); ++k) {
    d << num(m.x()(k)) << "," << num(n(k));
    if (ns == 2) d << "," << num(S.density[0](k)) << "," << num(S.density[1](k));
    d << "," << num(m.density_weight()(k)) << "\n";
    v << num(m.x()(k)) << "," << num(S.v_ext(k)) << "," << num(S.v_h(k));
    for (int s = 0; s < ns; ++s) v << "," << num(S.v_xc[s](k));
    for (int s = 0; s < ns; ++s) v << "," << num(S.v_s[s](k));
    v << "\n";
  }
  const std::string base = dir + "/" + P.spec().name;
  // One output set: a full disk leaves none of the three files behind.
  write_files_atomically({{base + "_density.csv", d.str()}, {base + "_potentials.csv", v.str()}, {base + ".json", json_text}});
}

}  // namespace stillpoint
