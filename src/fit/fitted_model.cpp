// The fitted model: a complete `solve` input with every fitted value in place.
#include <cmath>
#include <filesystem>
#include <set>
#include <sstream>

#include "fit/report_detail.hpp"
#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/xc/formula.hpp"

namespace stillpoint {

using namespace fit_detail;
namespace fs = std::filesystem;

std::string fitted_model_toml(const FitWorkflow& wf, const Eigen::VectorXd& theta, OutputFiles& tables) {
  const FitSpec& spec = wf.spec;
  const std::vector<SystemSpec> systems = apply_parameters(spec.systems, spec.parameters, theta);
  std::ostringstream o;
  o << "# Fitted model written by `stillpoint fit " << fs::path(wf.file).filename().string() << "`.\n"
    << "# A complete `solve` input: `stillpoint solve` reproduces the fitted systems, and `grad` or a later\n"
    << "# `fit` start from these values with  initial_model = \"<this file>\".\n"
    << "# Hartree atomic units: energies in hartree, lengths in bohr.\n#\n# Fitted parameters:\n";
  for (std::size_t i = 0; i < spec.parameters.size() && i < 60; ++i)
    o << "#   " << spec.parameters[i].name << " (" << system_name(wf, spec.parameters[i].system) << ") = " << g17(theta(i)) << "\n";
  if (spec.parameters.size() > 60) o << "#   ... (" << spec.parameters.size() - 60 << " more in parameters.csv)\n";
  const ScfOptions& scf = wf.base.scf;
  o << "\n[scf]\nmax_iterations = " << scf.max_iterations << "\npotential_tolerance = " << g17(scf.potential_tolerance)
    << "\nenergy_tolerance = " << g17(scf.energy_tolerance) << "\neigenvalue_tolerance = " << g17(scf.eigenvalue_tolerance)
    << "\nmixing = " << g17(scf.mixing) << "\nhistory = " << scf.history
    << "\ndensity_threshold = " << g17(wf.base.density_threshold) << "\n";
  // Formulas (their own defaults; fitted values are set per system below).
  std::set<std::string> written;
  for (const SystemSpec& s : systems)
    for (const FormulaSpec& f : s.formulas) {
      if (!written.insert(f.name).second) continue;
      o << "\n[formula." << f.name << "]\nexpression = " << toml_string(f.expression) << "\nper = \""
        << (f.per_volume ? "volume" : "particle") << "\"\n";
      if (!f.parameter_names.empty()) {
        o << "parameters = { ";
        for (std::size_t k = 0; k < f.parameter_names.size(); ++k)
          o << (k ? ", " : "") << f.parameter_names[k] << " = " << g17(f.parameter_values[k]);
        o << " }\n";
      }
    }
  for (const SystemSpec& s : systems) {
    const bool line = s.geometry == Geometry::Line;
    o << "\n[[system]]\nname = " << toml_string(s.name) << "\nkind = \"" << (line ? "line" : "atom") << "\"\n";
    if (!line) {
      o << "Z = " << s.atom.Z << "\nconfiguration = " << toml_string(format_configuration(s.atom.configuration)) << "\n";
    }
    o << "charge = " << g17(s.charge) << "\nspin = \"" << (s.spin_polarized ? "polarized" : "unpolarized") << "\"\n";
    if (!s.xc.empty()) {
      o << "xc = [";
      for (std::size_t k = 0; k < s.xc.size(); ++k) o << (k ? ", " : "") << toml_string(s.xc[k]);
      o << "]\n";
    }
    if (!s.xc_weights.empty()) {
      o << "xc_weights = [";
      for (std::size_t k = 0; k < s.xc_weights.size(); ++k) o << (k ? ", " : "") << g17(s.xc_weights[k]);
      o << "]\n";
    }
    bool any_params = false;
    std::ostringstream xp;
    for (std::size_t k = 0; k < s.xc_parameters.size() && k < s.xc.size(); ++k) {
      if (s.xc_parameters[k].empty()) continue;
      const auto names = make_functional({s.xc[k]}, settings_of(s)).term(0).parameter_names();
      const bool named = !names.empty() && names.size() == s.xc_parameters[k].size() &&
                         !(names[0] == "c0" && (names.size() < 2 || names[1] == "c1"));
      xp << (any_params ? ", " : "") << toml_string(s.xc[k]) << " = ";
      if (named) {
        xp << "{ ";
        for (std::size_t j = 0; j < names.size(); ++j) xp << (j ? ", " : "") << names[j] << " = " << g17(s.xc_parameters[k][j]);
        xp << " }";
      } else {
        xp << "[";
        for (std::size_t j = 0; j < s.xc_parameters[k].size(); ++j) xp << (j ? ", " : "") << g17(s.xc_parameters[k][j]);
        xp << "]";
      }
      any_params = true;
    }
    if (any_params) o << "xc_parameters = { " << xp.str() << " }\n";
    const MeshSpec& g = s.grid;
    if (line) {
      o << "grid = { preset = \"default\", degree = " << g.degree << ", element_size = " << g17(g.element_size)
        << ", half_width = " << g17(g.half_width) << " }\n";
      o << "electron_softening = " << g17(s.line.electron_softening) << "\ninteracting = "
        << (s.line.interacting ? "true" : "false") << "\n";
      if (!std::isnan(s.line.nucleus_softening)) o << "nucleus_softening = " << g17(s.line.nucleus_softening) << "\n";
      if (s.n_up) o << "n_up = " << g17(*s.n_up) << "\n";
      if (s.n_down) o << "n_down = " << g17(*s.n_down) << "\n";
      if (!s.occupations.empty()) {
        auto list = [&](const std::vector<double>& v) {
          std::string t = "[";
          for (std::size_t k = 0; k < v.size(); ++k) t += (k ? ", " : "") + g17(v[k]);
          return t + "]";
        };
        if (s.spin_polarized)
          o << "occupations = { up = " << list(s.occupations[0]) << ", down = "
            << list(s.occupations.size() > 1 ? s.occupations[1] : std::vector<double>{}) << " }\n";
        else
          o << "occupations = " << list(s.occupations[0]) << "\n";
      }
      o << "unoccupied_levels = " << s.unoccupied_levels << "\n";
      for (const Nucleus1d& n : s.line.nuclei)
        o << "[[system.nucleus]]\ncharge = " << g17(n.charge) << "\nposition = " << g17(n.position)
          << "\nsoftening = " << g17(n.softening) << "\n";
      int table_index = 0;
      for (const ExternalTerm& t : s.line.potentials) {
        o << "[[system.potential]]\n";
        switch (t.kind) {
          case ExternalTerm::Kind::Harmonic:
            o << "kind = \"harmonic\"\nomega = " << g17(t.omega) << "\ncenter = " << g17(t.center) << "\n";
            break;
          case ExternalTerm::Kind::Gaussian:
            o << "kind = \"gaussian\"\ndepth = " << g17(t.depth) << "\ncenter = " << g17(t.center) << "\nwidth = "
              << g17(t.width) << "\n";
            break;
          case ExternalTerm::Kind::Table: {
            const std::string name = s.name + "_potential" + std::to_string(table_index++) + ".csv";
            std::string csv = "# potential table copied from " + t.source + "; x in bohr, v in hartree\nx_bohr,v_hartree\n";
            for (std::size_t k = 0; k < t.table_x.size(); ++k) csv += g17(t.table_x[k]) + "," + g17(t.table_v[k]) + "\n";
            tables.emplace_back(name, csv);
            o << "kind = \"table\"\nfile = " << toml_string(name) << "\n";
            break;
          }
        }
      }
    } else {
      o << "grid = { preset = \"default\", degree = " << g.degree << ", elements = " << g.elements
        << ", first_element = " << g17(g.first_element) << ", first_element_over_z = "
        << (g.first_element_over_z ? "true" : "false") << ", r_max = " << g17(g.r_max) << " }\n";
    }
    if (!s.nodal_potential.empty()) {
      // The fitted grid potential: exact at the nodes (the spline through the nodal values
      // interpolates them), so `solve` sees the same discrete external potential.
      const Mesh m = mesh_of(s);
      const std::string name = s.name + "_grid_potential.csv";
      std::string csv = "# fitted grid potential of " + s.name + " at the mesh nodes; x in bohr, v in hartree\nx_bohr,v_hartree\n";
      for (int k = 0; k < m.num_nodes(); ++k) csv += g17(m.x()(k)) + "," + g17(s.nodal_potential[k]) + "\n";
      tables.emplace_back(name, csv);
      if (line)
        o << "[[system.potential]]\n# the fitted grid potential (nodal values)\nkind = \"table\"\nfile = " << toml_string(name)
          << "\n";
      else
        o << "# The fitted grid potential of this atom is in " << name
          << "; solve inputs cannot carry potentials for atoms,\n# but grad and fit read it through initial_model.\n";
    }
  }
  return o.str();
}

}  // namespace stillpoint
