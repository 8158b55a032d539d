#include "stillpoint/fit/report.hpp"

#include <nlohmann/json.hpp>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <map>
#include <numbers>
#include <set>
#include <sstream>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/formula.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/xc/functional.hpp"

namespace stillpoint {

namespace {

namespace fs = std::filesystem;
using nlohmann::json;

std::string g17(double v) {
  char b[40];
  std::snprintf(b, sizeof b, "%.17g", v);
  return b;
}
std::string g12(double v) {
  char b[40];
  std::snprintf(b, sizeof b, "%.12g", v);
  return b;
}
std::string e12(double v) {
  char b[40];
  std::snprintf(b, sizeof b, "%.12e", v);
  return b;
}
// Terminal number: "n/a" for missing values (nothing non-finite is ever printed).
std::string sci(double v) {
  if (!std::isfinite(v)) return "n/a";
  char b[40];
  std::snprintf(b, sizeof b, "% .6e", v);
  return b;
}
// CSV cell: empty for missing values.
std::string cell(double v) { return std::isfinite(v) ? e12(v) : std::string(); }
json jnum(double v) { return std::isfinite(v) ? json(v) : json(nullptr); }

std::string toml_string(const std::string& s) {
  std::string o = "\"";
  for (char c : s) {
    if (c == '"' || c == '\\') {
      o += '\\';
      o += c;
    } else if (static_cast<unsigned char>(c) < 0x20) {
      char b[8];
      std::snprintf(b, sizeof b, "\\u%04x", c);
      o += b;
    } else {
      o += c;
    }
  }
  return o + "\"";
}

std::string csv_field(const std::string& s) {
  if (s.find_first_of(",\"\n") == std::string::npos) return s;
  std::string o = "\"";
  for (char c : s) o += c == '"' ? std::string("\"\"") : std::string(1, c);
  return o + "\"";
}

Mesh mesh_of(const SystemSpec& s) { return s.geometry == Geometry::Line ? Mesh::line(s.grid) : Mesh::radial(s.grid, s.atom.Z); }

XcSettings settings_of(const SystemSpec& s) {
  XcSettings xs;
  xs.one_dimensional = s.geometry == Geometry::Line;
  xs.softening = s.line.electron_softening;
  xs.density_threshold = s.density_threshold;
  for (const FormulaSpec& f : s.formulas) xs.formulas.push_back(compile_formula(f));
  return xs;
}

const char* kind_name(LossTerm::Kind k) {
  switch (k) {
    case LossTerm::Kind::Density:
      return "density";
    case LossTerm::Kind::Energy:
      return "energy";
    case LossTerm::Kind::Eigenvalue:
      return "eigenvalue";
    case LossTerm::Kind::EnergyDifference:
      return "energy_difference";
  }
  return "?";
}

const char* parameter_kind(ParameterRef::Kind k) {
  switch (k) {
    case ParameterRef::Kind::XcWeight:
      return "xc_weight";
    case ParameterRef::Kind::XcParameter:
      return "xc_parameter";
    case ParameterRef::Kind::Gaussian:
      return "gaussian";
    case ParameterRef::Kind::Harmonic:
      return "harmonic";
    case ParameterRef::Kind::Nucleus:
      return "nucleus";
    case ParameterRef::Kind::GridPotential:
      return "grid_potential";
  }
  return "?";
}

// One term of either set, with its values before and after.
struct TermRow {
  const LossTerm* term;
  const FitTermInfo* info;
  bool validation;
  double q0, q1, v0, v1;  // quantity and loss value, initial and fitted
};

std::vector<TermRow> term_rows(const FitWorkflow& wf, const FitResult& r) {
  std::vector<TermRow> rows;
  const FitSpec& s = wf.spec;
  auto at = [](const std::vector<double>& v, std::size_t i) {
    return i < v.size() ? v[i] : std::numeric_limits<double>::quiet_NaN();
  };
  for (std::size_t i = 0; i < s.training.size(); ++i)
    rows.push_back({&s.training[i], &s.training_info[i], false, at(r.before.training_quantities, i),
                    at(r.after.training_quantities, i), at(r.before.training_values, i), at(r.after.training_values, i)});
  for (std::size_t i = 0; i < s.validation.size(); ++i)
    rows.push_back({&s.validation[i], &s.validation_info[i], true, at(r.before.validation_quantities, i),
                    at(r.after.validation_quantities, i), at(r.before.validation_values, i),
                    at(r.after.validation_values, i)});
  return rows;
}

// The error a term measures: q - target (hartree) or the relative density distance.
double term_error(const TermRow& t, double q) {
  if (t.term->kind == LossTerm::Kind::Density) {
    const double norm = t.info->reference_norm;
    return norm > 0 && q >= 0 ? std::sqrt(q) / norm : std::numeric_limits<double>::quiet_NaN();
  }
  return t.term->target ? q - *t.term->target : q;
}

const char* term_unit(const LossTerm& t) {
  return t.kind == LossTerm::Kind::Density ? "relative L2 distance" : "hartree";
}

std::string system_name(const FitWorkflow& wf, int s) { return s >= 0 ? wf.spec.systems[s].name : std::string("all"); }

// Fitted values and their errors, for every free parameter.
double se(const FitResult& r, int i) {
  return r.uncertainty.computed && r.uncertainty.standard_error.size() > i ? r.uncertainty.standard_error(i)
                                                                            : std::numeric_limits<double>::quiet_NaN();
}
double se_unscaled(const FitResult& r, int i) {
  return r.uncertainty.computed && r.uncertainty.standard_error_unscaled.size() > i
             ? r.uncertainty.standard_error_unscaled(i)
             : std::numeric_limits<double>::quiet_NaN();
}

// ---------------------------------------------------------------------------------------
// The fitted xc model as curves: energy per particle against r_s for local terms, the
// enhancement over local exchange against s for gradient terms.
struct XcCurve {
  std::string term, label;  // term name, systems it belongs to
  bool gradient = false, one_dimensional = false;
  std::vector<double> x, initial, fitted;
};

std::vector<XcCurve> xc_curves(const FitWorkflow& wf, const FitResult& r) {
  std::vector<XcCurve> out;
  const FitSpec& s = wf.spec;
  std::set<std::string> terms;
  for (const auto& p : s.parameters)
    if (p.kind == ParameterRef::Kind::XcParameter) terms.insert(s.systems[p.system < 0 ? 0 : p.system].xc[p.index]);
  if (terms.empty()) return out;
  const auto sys0 = apply_parameters(s.systems, s.parameters, r.initial);
  const auto sys1 = apply_parameters(s.systems, s.parameters, r.fitted);
  for (const std::string& term : terms) {
    // Group systems by their (initial, fitted) parameter values of this term.
    std::map<std::pair<std::vector<double>, std::vector<double>>, std::vector<std::size_t>> groups;
    for (std::size_t k = 0; k < s.systems.size(); ++k) {
      const auto it = std::find(s.systems[k].xc.begin(), s.systems[k].xc.end(), term);
      if (it == s.systems[k].xc.end()) continue;
      const std::size_t ti = static_cast<std::size_t>(it - s.systems[k].xc.begin());
      auto params = [&](const SystemSpec& sp) {
        if (ti < sp.xc_parameters.size() && !sp.xc_parameters[ti].empty()) return sp.xc_parameters[ti];
        return make_functional({term}, settings_of(sp)).term(0).parameters();
      };
      groups[{params(sys0[k]), params(sys1[k])}].push_back(k);
    }
    for (const auto& [pv, members] : groups) {
      const SystemSpec& ref = s.systems[members.front()];
      const XcSettings xs = settings_of(ref);
      const XcFunctional f0 = make_functional({term}, xs, {pv.first}), f1 = make_functional({term}, xs, {pv.second});
      XcCurve c;
      c.term = term;
      std::size_t with_term = 0;
      for (const auto& sp : s.systems) with_term += std::count(sp.xc.begin(), sp.xc.end(), term) > 0;
      if (members.size() == with_term && with_term > 1)
        c.label = "(all systems)";
      else
        for (std::size_t m = 0; m < members.size() && m < 3; ++m)
          c.label += (m ? "," : "") + s.systems[members[m]].name + (m == 2 && members.size() > 3 ? ",..." : "");
      c.gradient = f0.needs_gradient();
      c.one_dimensional = xs.one_dimensional;
      const int np = 200;
      XcPointData in;
      in.nspin = 1;
      in.np = np;
      in.rho.resize(np);
      in.sigma.assign(np, 0.0);
      const double pi = std::numbers::pi;
      for (int i = 0; i < np; ++i) {
        if (!c.gradient) {
          const double rs = 0.5 + 9.5 * i / (np - 1);  // bohr
          c.x.push_back(rs);
          in.rho[i] = xs.one_dimensional ? 0.5 / rs : 3.0 / (4.0 * pi * rs * rs * rs);
        } else {
          const double sred = 3.0 * i / (np - 1);  // reduced gradient, dimensionless
          c.x.push_back(sred);
          in.rho[i] = 1.0;  // F(s) of exchange-like terms does not depend on n; n = 1 bohr^-3 otherwise
          const double g = xs.one_dimensional ? sred * pi : sred * 2.0 * std::cbrt(3.0 * pi * pi);
          in.sigma[i] = g * g;
        }
      }
      XcDerivatives d0, d1;
      d0.reset(1, np, c.gradient, 1);
      d1.reset(1, np, c.gradient, 1);
      f0.evaluate(in, 1, d0);
      f1.evaluate(in, 1, d1);
      // Reference for the enhancement factor: local (Dirac) exchange per volume at n = 1.
      const double ex_lda = -0.75 * std::cbrt(3.0 / pi) * 1.0;
      for (int i = 0; i < np; ++i) {
        if (!c.gradient) {
          c.initial.push_back(d0.e[i] / in.rho[i]);
          c.fitted.push_back(d1.e[i] / in.rho[i]);
        } else {
          c.initial.push_back(d0.e[i] / ex_lda);
          c.fitted.push_back(d1.e[i] / ex_lda);
        }
      }
      out.push_back(std::move(c));
    }
  }
  return out;
}

bool has_potential_parameters(const FitSpec& s, int system) {
  for (const auto& p : s.parameters) {
    const bool pot = p.kind == ParameterRef::Kind::Gaussian || p.kind == ParameterRef::Kind::Harmonic ||
                     p.kind == ParameterRef::Kind::Nucleus || p.kind == ParameterRef::Kind::GridPotential;
    if (pot && (p.system < 0 || p.system == system)) return true;
  }
  return false;
}

const LossTerm* density_term(const FitSpec& s, int system) {
  for (const auto& t : s.training)
    if (t.kind == LossTerm::Kind::Density && t.system == system) return &t;
  for (const auto& t : s.validation)
    if (t.kind == LossTerm::Kind::Density && t.system == system) return &t;
  return nullptr;
}

void require_finite(const std::string& what, double v) {
  if (!std::isfinite(v)) throw NumericalError("refusing to write a non-finite value: " + what);
}

}  // namespace

// ---------------------------------------------------------------------------------------
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

// ---------------------------------------------------------------------------------------
OutputFiles fit_output_files(const FitWorkflow& wf, const FitResult& r) {
  OutputFiles files;
  const FitSpec& s = wf.spec;
  const auto rows = term_rows(wf, r);
  const int p = static_cast<int>(s.parameters.size());
  for (int i = 0; i < p; ++i) require_finite("fitted parameter " + s.parameters[i].name, r.fitted(i));
  require_finite("training loss", r.after.training_loss);

  // parameters.csv
  {
    std::ostringstream c;
    c << "# fitted parameters (stillpoint fit " << fs::path(wf.file).filename().string()
      << "); values in the parameter's own units (hartree, bohr, or dimensionless model coefficients)\n";
    c << "name,system,kind,initial,fitted,lower,upper,standard_error,standard_error_unscaled,published,published_source\n";
    for (int i = 0; i < p; ++i) {
      const auto& q = s.parameters[i];
      const auto& in = s.info[i];
      c << csv_field(q.name) << "," << csv_field(system_name(wf, q.system)) << "," << parameter_kind(q.kind) << ","
        << e12(r.initial(i)) << "," << e12(r.fitted(i)) << "," << cell(q.lower) << "," << cell(q.upper) << ","
        << cell(se(r, i)) << "," << cell(se_unscaled(r, i)) << ","
        << (in.published ? e12(*in.published) : std::string()) << "," << csv_field(in.published_source) << "\n";
    }
    files.emplace_back("parameters.csv", c.str());
  }
  // terms.csv
  {
    std::ostringstream c;
    c << "# every loss term before and after the fit; quantity and error in hartree (energies, eigenvalues) or as the "
         "relative L2 distance (densities); loss in loss units (docs/fit.md)\n";
    c << "set,term,kind,system,minus,unit,target,quantity_initial,quantity_fitted,error_initial,error_fitted,loss_initial,"
         "loss_fitted,scale,weight\n";
    for (const auto& t : rows) {
      const bool dens = t.term->kind == LossTerm::Kind::Density;
      c << (t.validation ? "validation" : "training") << "," << csv_field(t.term->name) << "," << kind_name(t.term->kind)
        << "," << csv_field(system_name(wf, t.term->system)) << ","
        << (t.term->system_b >= 0 ? csv_field(system_name(wf, t.term->system_b)) : std::string()) << "," << term_unit(*t.term)
        << "," << (t.term->target ? e12(*t.term->target) : std::string()) << "," << (dens ? "" : cell(t.q0)) << ","
        << (dens ? "" : cell(t.q1)) << "," << cell(term_error(t, t.q0)) << "," << cell(term_error(t, t.q1)) << ","
        << cell(t.v0) << "," << cell(t.v1) << "," << cell(t.info->scale) << "," << cell(t.info->user_weight) << "\n";
    }
    files.emplace_back("terms.csv", c.str());
  }
  // systems.csv and per-system sums
  struct SysRow {
    double e0 = NAN, e1 = NAN, t0 = 0, t1 = 0, v0 = 0, v1 = 0;
    bool train = false, valid = false;
  };
  std::vector<SysRow> sys(s.systems.size());
  for (std::size_t k = 0; k < s.systems.size(); ++k) {
    if (k < r.before.solutions.size() && !r.before.solutions[k].v_s.empty()) sys[k].e0 = r.before.solutions[k].energy.total;
    if (k < r.after.solutions.size() && !r.after.solutions[k].v_s.empty()) sys[k].e1 = r.after.solutions[k].energy.total;
  }
  for (const auto& t : rows) {
    SysRow& q = sys[t.term->system];
    (t.validation ? q.valid : q.train) = true;
    (t.validation ? q.v0 : q.t0) += std::isfinite(t.v0) ? t.v0 : 0.0;
    (t.validation ? q.v1 : q.t1) += std::isfinite(t.v1) ? t.v1 : 0.0;
  }
  {
    std::ostringstream c;
    c << "# per system: total energy (hartree) and summed loss of its terms (loss units; an energy difference counts "
         "for its first system), before and after the fit\n";
    c << "system,kind,sets,electrons,energy_initial_hartree,energy_fitted_hartree,training_loss_initial,"
         "training_loss_fitted,validation_loss_initial,validation_loss_fitted\n";
    for (std::size_t k = 0; k < s.systems.size(); ++k) {
      const auto& q = sys[k];
      const std::string sets = q.train && q.valid ? "training+validation" : q.train ? "training" : q.valid ? "validation" : "none";
      c << csv_field(s.systems[k].name) << "," << (s.systems[k].geometry == Geometry::Line ? "line" : "atom") << "," << sets
        << "," << g12(s.systems[k].electron_count()) << "," << cell(q.e0) << "," << cell(q.e1) << ","
        << (q.train ? e12(q.t0) : "") << "," << (q.train ? e12(q.t1) : "") << "," << (q.valid ? e12(q.v0) : "") << ","
        << (q.valid ? e12(q.v1) : "") << "\n";
    }
    files.emplace_back("systems.csv", c.str());
  }
  // history.csv
  {
    std::ostringstream c;
    c << "# one row per optimizer iteration; loss in loss units, gradient norm in loss units per parameter unit, "
         "seconds of wall time since the start\n";
    c << "iteration,loss,gradient_norm,validation_loss,seconds,step_successful\n";
    for (const auto& h : r.history)
      c << h.iteration << "," << cell(h.loss) << "," << cell(h.gradient_norm) << "," << cell(h.validation_loss) << ","
        << cell(h.seconds) << "," << (h.step_successful ? 1 : 0) << "\n";
    files.emplace_back("history.csv", c.str());
  }
  // correlation.csv
  if (r.uncertainty.computed) {
    std::ostringstream c;
    c << "# correlation matrix of the fitted parameters (Gauss-Newton approximation at the optimum)\nparameter";
    for (int i = 0; i < p; ++i) c << "," << csv_field(s.parameters[i].name);
    c << "\n";
    for (int i = 0; i < p; ++i) {
      c << csv_field(s.parameters[i].name);
      for (int j = 0; j < p; ++j) c << "," << cell(r.uncertainty.correlation(i, j));
      c << "\n";
    }
    files.emplace_back("correlation.csv", c.str());
  }
  // Densities and potentials.
  json density_files = json::array(), potential_files = json::array();
  for (std::size_t k = 0; k < s.systems.size(); ++k) {
    const bool have0 = k < r.before.solutions.size() && !r.before.solutions[k].v_s.empty();
    const bool have1 = k < r.after.solutions.size() && !r.after.solutions[k].v_s.empty();
    if (!have0 || !have1) continue;
    const SystemSpec& sp = s.systems[k];
    const Mesh m = mesh_of(sp);
    const bool line = sp.geometry == Geometry::Line;
    const LossTerm* dt = density_term(s, static_cast<int>(k));
    const Eigen::VectorXd n0 = r.before.solutions[k].total_density(), n1 = r.after.solutions[k].total_density();
    std::ostringstream c;
    c << "# density of " << sp.name << ": reference, initial and fitted; " << (line ? "x in bohr, n in electrons/bohr"
                                                                                   : "r in bohr, n in electrons/bohr^3, "
                                                                                     "radial_* = 4 pi r^2 n in electrons/bohr")
      << "\n";
    c << (line ? "x_bohr,n_reference_per_bohr,n_initial_per_bohr,n_fitted_per_bohr\n"
               : "r_bohr,n_reference_per_bohr3,n_initial_per_bohr3,n_fitted_per_bohr3,radial_reference,radial_initial,"
                 "radial_fitted\n");
    for (int i = line ? 0 : 1; i < m.num_nodes(); ++i) {
      const double x = m.x()(i);
      const double ref = dt ? dt->reference[i] : NAN;
      c << e12(x) << "," << cell(ref) << "," << e12(n0(i)) << "," << e12(n1(i));
      if (!line) {
        const double f = 4.0 * std::numbers::pi * x * x;
        c << "," << cell(f * ref) << "," << e12(f * n0(i)) << "," << e12(f * n1(i));
      }
      c << "\n";
    }
    files.emplace_back(sp.name + "_density.csv", c.str());
    density_files.push_back(sp.name + "_density.csv");
    if (line && has_potential_parameters(s, static_cast<int>(k))) {
      std::ostringstream v;
      v << "# external potential of " << sp.name << " before and after the fit; x in bohr, v in hartree\n";
      v << "x_bohr,v_ext_initial_hartree,v_ext_fitted_hartree\n";
      const Eigen::VectorXd& a = r.before.solutions[k].v_ext;
      const Eigen::VectorXd& b = r.after.solutions[k].v_ext;
      for (int i = 0; i < m.num_nodes(); ++i) v << e12(m.x()(i)) << "," << cell(a(i)) << "," << cell(b(i)) << "\n";
      files.emplace_back(sp.name + "_potential.csv", v.str());
      potential_files.push_back(sp.name + "_potential.csv");
    }
  }
  // xc_model.csv
  const auto curves = xc_curves(wf, r);
  if (!curves.empty()) {
    std::ostringstream c;
    c << "# fitted xc model terms: for local terms eps per particle (hartree) against r_s (bohr; 1D: r_s = 1/(2n)); for "
         "gradient terms the enhancement e/e_x^LDA at n = 1 bohr^-3 against the reduced gradient s\n";
    c << "term,systems,variable,x,initial,fitted\n";
    for (const auto& cv : curves)
      for (std::size_t i = 0; i < cv.x.size(); ++i)
        c << csv_field(cv.term) << "," << csv_field(cv.label) << "," << (cv.gradient ? "s" : "rs_bohr") << "," << e12(cv.x[i])
          << "," << cell(cv.initial[i]) << "," << cell(cv.fitted[i]) << "\n";
    files.emplace_back("xc_model.csv", c.str());
  }
  // The fitted model.
  OutputFiles tables;
  files.emplace_back("fitted-model.toml", fitted_model_toml(wf, r.fitted, tables));
  for (auto& t : tables) files.push_back(std::move(t));

  // fit.json
  json j;
  j["units"] = {{"energy", "hartree"}, {"length", "bohr"}, {"loss", "dimensionless loss units (docs/fit.md)"}};
  j["workflow"] = wf.file;
  j["optimizer"] = s.options.optimizer == FitOptions::Optimizer::Lbfgs ? "lbfgs" : "levenberg_marquardt";
  j["termination"] = to_string(r.termination);
  j["message"] = r.message;
  int its = 0;
  for (const auto& h : r.history) its = std::max(its, h.iteration);
  j["iterations"] = its;
  j["evaluations"] = r.evaluations + r.replayed_evaluations;
  j["max_linear_residual"] = r.max_linear_residual;
  j["replayed_evaluations"] = r.replayed_evaluations;
  j["threads"] = s.options.threads;
  j["seconds"] = jnum(r.seconds);
  j["seconds_per_iteration"] = jnum(r.seconds_per_iteration);
  j["loss"] = {{"training", {{"initial", jnum(r.before.training_loss)}, {"fitted", jnum(r.after.training_loss)}}},
               {"regularization", {{"initial", jnum(r.before.regularization)}, {"fitted", jnum(r.after.regularization)}}},
               {"validation", {{"initial", jnum(r.before.validation_loss)}, {"fitted", jnum(r.after.validation_loss)}}}};
  json params = json::array();
  for (int i = 0; i < p; ++i) {
    const auto& q = s.parameters[i];
    const auto& in = s.info[i];
    params.push_back({{"name", q.name},
                      {"system", system_name(wf, q.system)},
                      {"kind", parameter_kind(q.kind)},
                      {"initial", jnum(r.initial(i))},
                      {"fitted", jnum(r.fitted(i))},
                      {"lower", jnum(q.lower)},
                      {"upper", jnum(q.upper)},
                      {"scale", jnum(in.scale)},
                      {"standard_error", jnum(se(r, i))},
                      {"standard_error_unscaled", jnum(se_unscaled(r, i))},
                      {"published", in.published ? jnum(*in.published) : json(nullptr)},
                      {"published_source", in.published_source}});
  }
  j["parameters"] = params;
  json fixed = json::array();
  const Eigen::VectorXd fv = parameter_values(s.systems, s.fixed);
  for (std::size_t i = 0; i < s.fixed.size(); ++i)
    fixed.push_back({{"name", s.fixed[i].name}, {"system", system_name(wf, s.fixed[i].system)}, {"value", jnum(fv(i))}});
  j["fixed_parameters"] = fixed;
  const FitUncertainty& u = r.uncertainty;
  json unc = {{"computed", u.computed},
              {"note", u.note},
              {"method", "Gauss-Newton: covariance s^2 (J^T J)^-1 with s^2 = RSS/(m - p); unscaled: (J^T J)^-1"},
              {"condition_number", jnum(u.condition_number)},
              {"ill_conditioned", u.ill_conditioned},
              {"residuals", u.residuals},
              {"degrees_of_freedom", u.degrees_of_freedom},
              {"residual_variance", jnum(u.residual_variance)}};
  if (u.computed) {
    json corr = json::array();
    for (int i = 0; i < p; ++i) {
      json row = json::array();
      for (int k = 0; k < p; ++k) row.push_back(jnum(u.correlation(i, k)));
      corr.push_back(row);
    }
    unc["correlation"] = corr;
  }
  j["uncertainty"] = unc;
  json terms = json::array();
  for (const auto& t : rows) {
    json e = {{"name", t.term->name},
              {"set", t.validation ? "validation" : "training"},
              {"kind", kind_name(t.term->kind)},
              {"system", system_name(wf, t.term->system)},
              {"unit", term_unit(*t.term)},
              {"weight", jnum(t.info->user_weight)},
              {"scale", jnum(t.info->scale)},
              {"error", {{"initial", jnum(term_error(t, t.q0))}, {"fitted", jnum(term_error(t, t.q1))}}},
              {"loss", {{"initial", jnum(t.v0)}, {"fitted", jnum(t.v1)}}}};
    if (t.term->system_b >= 0) e["minus"] = system_name(wf, t.term->system_b);
    if (t.term->target) e["target"] = jnum(*t.term->target);
    if (t.term->kind != LossTerm::Kind::Density) e["quantity"] = {{"initial", jnum(t.q0)}, {"fitted", jnum(t.q1)}};
    if (!t.term->state.empty()) e["state"] = t.term->state;
    terms.push_back(e);
  }
  j["terms"] = terms;
  json systems = json::array();
  for (std::size_t k = 0; k < s.systems.size(); ++k) {
    const auto& q = sys[k];
    json e = {{"name", s.systems[k].name},
              {"electrons", s.systems[k].electron_count()},
              {"energy", {{"initial", jnum(q.e0)}, {"fitted", jnum(q.e1)}}}};
    if (q.train) e["training_loss"] = {{"initial", jnum(q.t0)}, {"fitted", jnum(q.t1)}};
    if (q.valid) e["validation_loss"] = {{"initial", jnum(q.v0)}, {"fitted", jnum(q.v1)}};
    systems.push_back(e);
  }
  j["systems"] = systems;
  json hist = json::array();
  for (const auto& h : r.history)
    hist.push_back({{"iteration", h.iteration},
                    {"loss", jnum(h.loss)},
                    {"gradient_norm", jnum(h.gradient_norm)},
                    {"validation_loss", jnum(h.validation_loss)},
                    {"seconds", jnum(h.seconds)},
                    {"step_successful", h.step_successful}});
  j["history"] = hist;
  j["rejected"] = r.rejected;
  std::vector<std::string> warnings = wf.warnings;
  warnings.insert(warnings.end(), r.warnings.begin(), r.warnings.end());
  j["warnings"] = warnings;
  json listing = json::array();
  for (const auto& f : files) listing.push_back(f.first);
  j["files"] = listing;
  files.emplace(files.begin(), "fit.json", j.dump(2) + "\n");
  return files;
}

// ---------------------------------------------------------------------------------------
std::string fit_summary(const FitWorkflow& wf, const FitResult& r) {
  const FitSpec& s = wf.spec;
  std::ostringstream o;
  char b[400];
  int its = 0;
  for (const auto& h : r.history) its = std::max(its, h.iteration);
  std::snprintf(b, sizeof b, "fit: %s after %d iterations (%d evaluations%s), %.2f s; %s\n", to_string(r.termination).c_str(),
                its, r.evaluations + r.replayed_evaluations,
                r.replayed_evaluations ? (", " + std::to_string(r.replayed_evaluations) + " replayed").c_str() : "",
                r.seconds, r.message.c_str());
  o << b;
  std::snprintf(b, sizeof b, "  training loss   %s -> %s   (regularization %s; loss units, docs/fit.md)\n",
                sci(r.before.training_loss).c_str(), sci(r.after.training_loss).c_str(), sci(r.after.regularization).c_str());
  o << b;
  if (!s.validation.empty()) {
    std::snprintf(b, sizeof b, "  validation loss %s -> %s   (never used by the optimizer)\n", sci(r.before.validation_loss).c_str(),
                  sci(r.after.validation_loss).c_str());
    o << b;
  }
  const int p = static_cast<int>(s.parameters.size());
  const bool many = p > 30;
  o << "  parameter                          initial          fitted      std. error     published\n";
  for (int i = 0; i < p; ++i) {
    if (many && i >= 10 && i < p - 5) {
      if (i == 10) o << "  ... (" << p - 15 << " more in parameters.csv)\n";
      continue;
    }
    const auto& in = s.info[i];
    char err[40] = "-";
    if (std::isfinite(se(r, i)))
      std::snprintf(err, sizeof err, "%.3e", se(r, i));
    else if (std::isfinite(se_unscaled(r, i)))
      std::snprintf(err, sizeof err, "(%.3e)", se_unscaled(r, i));
    std::snprintf(b, sizeof b, "  %-28s % 15.8g % 15.10g  %12s  %s\n", s.parameters[i].name.c_str(), r.initial(i),
                  r.fitted(i), err,
                  in.published ? (g12(*in.published) + (in.published_source.empty() ? "" : " (" + in.published_source + ")")).c_str()
                               : "");
    o << b;
  }
  if (r.uncertainty.computed && r.uncertainty.standard_error.size() == 0)
    o << "  (errors in parentheses: the normalization scales taken as standard deviations; " << r.uncertainty.note << ")\n";
  else if (!r.uncertainty.computed && !r.uncertainty.note.empty())
    o << "  no standard errors: " << r.uncertainty.note << "\n";
  const auto rows = term_rows(wf, r);
  o << "  term                               set          error before     error after    (hartree; densities: relative L2)\n";
  int shown = 0;
  for (const auto& t : rows) {
    if (++shown > 40) {
      o << "  ... (" << rows.size() - 40 << " more in terms.csv)\n";
      break;
    }
    std::snprintf(b, sizeof b, "  %-34s %-10s %15s %15s\n", t.term->name.c_str(), t.validation ? "validation" : "training",
                  sci(term_error(t, t.q0)).c_str(), sci(term_error(t, t.q1)).c_str());
    o << b;
  }
  for (const auto& w : r.warnings) o << "  warning: " << w << "\n";
  if (!r.rejected.empty()) o << "  " << r.rejected.size() << " trial point(s) rejected (listed in fit.json)\n";
  return o.str();
}

// ---------------------------------------------------------------------------------------
OutputFiles fit_plot_scripts(const FitWorkflow& wf, const FitResult& r) {
  OutputFiles out;
  const FitSpec& s = wf.spec;
  auto script = [](const std::string& stem, const std::string& body) {
    // Both formats from one plot body; outputs go to temporary names and are renamed by
    // render_plots, so a plot file that exists is complete.
    std::string t = "# gnuplot script written by stillpoint fit; run from this directory: gnuplot " + stem + ".gp\n";
    t += "set datafile separator ','\nset key top right autotitle columnhead\nset grid\n";
    t += "set terminal pngcairo size 900,600 noenhanced font 'sans,11'\nset output '" + stem + ".png.part'\n" + body;
    t += "set terminal svg size 900,600 noenhanced font 'sans,11'\nset output '" + stem + ".svg.part'\nreplot\nunset output\n";
    return t;
  };
  // Loss history.
  {
    std::string body = "set title 'Loss history'\nset xlabel 'iteration'\nset ylabel 'loss (dimensionless loss units)'\nset logscale y\n";
    body += "plot '../history.csv' using 1:2 every ::0 with linespoints lw 2 title 'training loss'";
    if (!s.validation.empty()) body += ", '' using 1:($4 > 0 ? $4 : 1/0) with linespoints lw 2 title 'validation loss'";
    body += "\n";
    out.emplace_back("plots/loss.gp", script("loss", body));
  }
  for (std::size_t k = 0; k < s.systems.size(); ++k) {
    if (k >= r.after.solutions.size() || r.after.solutions[k].v_s.empty()) continue;
    const SystemSpec& sp = s.systems[k];
    const bool line = sp.geometry == Geometry::Line;
    const std::string data = "../" + sp.name + "_density.csv";
    std::string body = "set title " + toml_string("Density of " + sp.name) + "\n";
    body += std::string("set xlabel '") + (line ? "x (bohr)" : "r (bohr)") + "'\n";
    body += std::string("set ylabel '") + (line ? "n (electrons/bohr)" : "4 pi r^2 n (electrons/bohr)") + "'\n";
    if (!line) body += "set xrange [0:" + g12(std::min(sp.grid.r_max, 8.0)) + "]\n";
    const int c0 = line ? 2 : 5;
    const bool ref = density_term(s, static_cast<int>(k)) != nullptr;
    body += "plot ";
    if (ref) body += "'" + data + "' using 1:" + std::to_string(c0) + " with lines lw 3 dt 1 title 'reference', ";
    body += "'" + data + "' using 1:" + std::to_string(c0 + 1) + " with lines lw 2 dt 2 title 'initial', '' using 1:" +
            std::to_string(c0 + 2) + " with lines lw 2 title 'fitted'\n";
    out.emplace_back("plots/" + sp.name + "_density.gp", script(sp.name + "_density", body));
    if (line && has_potential_parameters(s, static_cast<int>(k))) {
      std::string pb = "set title " + toml_string("External potential of " + sp.name) +
                       "\nset xlabel 'x (bohr)'\nset ylabel 'v_ext (hartree)'\n";
      pb += "plot '../" + sp.name + "_potential.csv' using 1:2 with lines lw 2 dt 2 title 'initial', '' using 1:3 with lines lw 2 title 'fitted'\n";
      out.emplace_back("plots/" + sp.name + "_potential.gp", script(sp.name + "_potential", pb));
    }
  }
  const auto curves = xc_curves(wf, r);
  if (!curves.empty()) {
    const bool grad = curves.front().gradient;
    std::string body = "set title 'Fitted exchange-correlation model'\n";
    body += grad ? "set xlabel 's (reduced density gradient, dimensionless)'\nset ylabel 'F = e / e_x(LDA) at n = 1 bohr^-3'\n"
                 : "set xlabel 'r_s (bohr)'\nset ylabel 'energy per particle (hartree)'\n";
    body += "plot ";
    // Row ranges of each curve in xc_model.csv (200 rows each, after 2 header lines).
    for (std::size_t c = 0; c < curves.size() && c < 8; ++c) {
      if (curves[c].gradient != grad) continue;
      const std::string every = "every ::" + std::to_string(c * 200) + "::" + std::to_string(c * 200 + 199);
      const std::string lab = curves[c].term + " " + curves[c].label;
      body += std::string(c ? ", " : "") + "'../xc_model.csv' " + every + " using 4:5 with lines lw 2 dt 2 title " +
              toml_string(lab + " initial") + ", '' " + every + " using 4:6 with lines lw 2 title " + toml_string(lab + " fitted");
    }
    body += "\n";
    out.emplace_back("plots/xc_model.gp", script("xc_model", body));
  }
  return out;
}

std::string render_plots(const std::string& dir, const OutputFiles& scripts) {
  if (std::system("command -v gnuplot >/dev/null 2>&1") != 0) return "gnuplot is not installed: no plots (the data are in the CSV files)";
  const fs::path pd = fs::path(dir) / "plots";
  std::string failed;
  for (const auto& [name, text] : scripts) {
    (void)text;
    const std::string stem = fs::path(name).stem().string();
    const std::string cmd = "cd '" + pd.string() + "' && gnuplot '" + stem + ".gp' >'" + stem + ".log' 2>&1";
    if (std::system(cmd.c_str()) != 0) {
      failed += (failed.empty() ? "" : ", ") + stem;
      continue;
    }
    for (const char* ext : {".png", ".svg"}) {
      std::error_code ec;
      fs::rename(pd / (stem + ext + ".part"), pd / (stem + ext), ec);
      if (ec) failed += (failed.empty() ? "" : ", ") + stem + ext;
    }
    std::error_code ec;
    fs::remove(pd / (stem + ".log"), ec);
  }
  return failed.empty() ? "" : "gnuplot failed for: " + failed + " (see plots/*.log)";
}

}  // namespace stillpoint
