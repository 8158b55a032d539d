// `invert` input files and the reports of an inversion (terminal summary, JSON, CSV, gnuplot).
#include <toml++/toml.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <nlohmann/json.hpp>
#include <sstream>

#include "common/toml_input.hpp"
#include "ks/input_detail.hpp"
#include "common/format.hpp"
#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/invert/inversion.hpp"

namespace stillpoint {

namespace {

namespace fs = std::filesystem;
using detail::location;

const std::vector<std::string> kInvertKeys{"target",          "column",           "form",
                                           "method",          "reference_potential", "constant",
                                           "ionization_energy", "regularization", "regularization_start",
                                           "density_tolerance", "trust_threshold", "max_iterations"};

[[noreturn]] void bad(const std::string& file, const toml::node& n, const std::string& key, const std::string& msg) {
  throw InputError(location(file, n, "invert." + key), msg);
}

std::string choice(const std::string& file, const toml::table& t, const std::string& key, const std::string& def,
                   const std::vector<std::string>& allowed) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  const std::string v = detail::string_key(file, t, "invert", key, def);
  if (std::find(allowed.begin(), allowed.end(), v) == allowed.end()) {
    std::string list;
    for (std::size_t i = 0; i < allowed.size(); ++i) list += (i ? ", " : "") + ("\"" + allowed[i] + "\"");
    const std::string near = nearest_word(v, allowed);
    bad(file, *n, key, "unknown value '" + v + "'" + (near.empty() ? "" : " (did you mean '" + near + "'?)") + "; use " + list);
  }
  return v;
}

double positive(const std::string& file, const toml::table& t, const std::string& key, double def, bool allow_zero = false) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  const double v = detail::finite_number(file, *n, "invert." + key);
  if (allow_zero ? v < 0 : v <= 0) bad(file, *n, key, allow_zero ? "must not be negative" : "must be positive");
  return v;
}

InvertInput parse_root(const toml::table& root, const std::string& file) {
  InvertInput in;
  in.file = file;
  if (const toml::node* sn = root.get("scf"))
    throw InputError(location(file, *sn, "scf"), "invert runs no SCF, so [scf] has no effect; remove it");
  SolveInput base = detail::parse_solve_root(root, file, {"invert"}, GridUse::Dense);
  if (base.systems.size() != 1)
    throw InputError(base.system_locations[1], "invert takes exactly one [[system]]; this file has " +
                                                   std::to_string(base.systems.size()) +
                                                   " (write one input file per system)");
  in.system = base.systems[0];
  in.system_location = base.system_locations[0];
  const toml::node* node = root.get("invert");
  if (!node) throw InputError(SourceLocation{file, 0, 0, "invert"}, "no [invert] table given: nothing to invert");
  const toml::table* t = node->as_table();
  if (!t) throw InputError(location(file, *node, "invert"), "expected an [invert] table");
  detail::refuse_renamed_key(file, *t, "invert", "guide", "reference_potential",
                             "\"fermi_amaldi\", \"external_and_hartree\" (was \"hartree\"), \"external_only\" (was \"external\")");
  detail::check_keys(file, *t, "invert", kInvertKeys, /*list_valid=*/false);
  const toml::node* tn = t->get("target");
  if (!tn) throw InputError(location(file, *t, "invert.target"), "missing target = \"FILE.csv\" (the density to invert)");
  auto target = tn->value<std::string>();
  if (!target || target->empty()) bad(file, *tn, "target", "expected the name of a density table (string)");
  fs::path p(*target);
  if (p.is_relative()) p = fs::path(file).parent_path() / p;
  in.target_file = p.lexically_normal().string();
  in.target_location = location(file, *tn, "invert.target");
  if (!fs::exists(in.target_file)) bad(file, *tn, "target", "no such file: " + in.target_file);
  if (const toml::node* cn = t->get("column")) {
    auto c = cn->value<std::string>();
    if (!c || c->empty()) bad(file, *cn, "column", "expected a column name (string)");
    in.target_column = *c;
  }
  InversionOptions& o = in.options;
  const SystemSpec& s = in.system;
  const bool line_noninteracting = s.geometry == Geometry::Line && !s.line.interacting;
  const std::string form =
      choice(file, *t, "form", line_noninteracting ? "non_interacting" : "interacting", {"interacting", "non_interacting"});
  o.form = form == "interacting" ? InversionOptions::Form::Interacting : InversionOptions::Form::NonInteracting;
  if (o.form == InversionOptions::Form::Interacting && line_noninteracting)
    bad(file, *t->get("form"), "form",
        "form = \"interacting\" needs interacting electrons, but the system sets interacting = false");
  if (o.form == InversionOptions::Form::NonInteracting && !s.xc.empty())
    throw InputError(in.system_location,
                     "system '" + s.name + "': xc has no meaning in the non-interacting form (there is no v_xc); remove it");
  o.method = choice(file, *t, "method", "wu_yang", {"wu_yang", "direct"}) == "wu_yang" ? InversionOptions::Method::WuYang
                                                                                       : InversionOptions::Method::Direct;
  // The fixed part of v = v_ref + Δ, named by what it contains.
  const std::string ref =
      choice(file, *t, "reference_potential",
             o.form == InversionOptions::Form::Interacting ? "fermi_amaldi" : "external_only",
             {"fermi_amaldi", "external_and_hartree", "external_only"});
  o.reference_potential = ref == "fermi_amaldi"           ? InversionOptions::ReferencePotential::FermiAmaldi
                          : ref == "external_and_hartree" ? InversionOptions::ReferencePotential::ExternalAndHartree
                                                          : InversionOptions::ReferencePotential::ExternalOnly;
  const bool has_ip = t->get("ionization_energy") != nullptr;
  const std::string constant = choice(file, *t, "constant", has_ip ? "ionization" : "asymptotic", {"asymptotic", "ionization"});
  if (constant == "ionization") {
    o.constant = InversionOptions::Constant::Ionization;
    if (!has_ip) bad(file, *t->get("constant"), "constant", "constant = \"ionization\" needs ionization_energy = I (hartree)");
    const toml::node& ipn = *t->get("ionization_energy");
    if (const toml::array* arr = ipn.as_array()) {
      const int ns = in.system.spin_polarized ? 2 : 1;
      if (ns != 2 || arr->size() != 2)
        bad(file, ipn, "ionization_energy",
            ns == 2 ? "expected one number (the highest level of either spin) or two, [I_up, I_down] (hartree)"
                    : "a list of ionization energies (one per spin) needs spin = \"polarized\" in the system; give one number");
      for (const toml::node& e : *arr) {
        const auto v = e.value<double>();
        if (!v || !(*v > 0) || !std::isfinite(*v)) bad(file, e, "ionization_energy", "expected positive numbers (hartree)");
        o.spin_ionization_energies.push_back(*v);
      }
    } else {
      o.ionization_energy = positive(file, *t, "ionization_energy", 0.0);
    }
  } else if (has_ip) {
    bad(file, *t->get("ionization_energy"), "ionization_energy",
        "ionization_energy is used only with constant = \"ionization\"; remove one of the two");
  }
  if (const toml::node* rn = t->get("regularization")) {
    if (auto sv = rn->value<std::string>()) {
      if (*sv != "auto") bad(file, *rn, "regularization", "expected \"auto\" or a positive number");
      o.regularization = 0.0;
    } else {
      o.regularization = positive(file, *t, "regularization", 0.0);
    }
  }
  o.regularization_start = positive(file, *t, "regularization_start", o.regularization_start);
  o.density_tolerance = positive(file, *t, "density_tolerance", 1e-8);
  o.trust_threshold = positive(file, *t, "trust_threshold", o.trust_threshold, true);
  if (const toml::node* mn = t->get("max_iterations")) {
    auto v = mn->value<int64_t>();
    if (!v || *v < 1 || *v > 100000) bad(file, *mn, "max_iterations", "expected an integer between 1 and 100000");
    o.max_iterations = static_cast<int>(*v);
  }
  return in;
}

std::string num(double v) { return detail::e12(v); }

using detail::g6;

const char* form_name(const InversionOptions& o) {
  return o.form == InversionOptions::Form::Interacting ? "interacting" : "non_interacting";
}
const char* method_name(const InversionOptions& o) {
  return o.method == InversionOptions::Method::WuYang ? "wu_yang" : "direct";
}
const char* reference_potential_name(const InversionOptions& o) {
  switch (o.reference_potential) {
    case InversionOptions::ReferencePotential::FermiAmaldi: return "fermi_amaldi";
    case InversionOptions::ReferencePotential::ExternalAndHartree: return "external_and_hartree";
    default: return "external_only";
  }
}

std::string spin_label(int ns, int s) { return ns == 1 ? "both" : (s == 0 ? "up" : "down"); }

struct Extent {
  bool any = false;
  double lo = 0.0, hi = 0.0;
};

Extent trusted_extent(const Mesh& m, const InversionResult& r) {
  Extent e;
  for (int k = 0; k < m.num_nodes(); ++k)
    if (r.trusted[k]) {
      if (!e.any) e.lo = m.x()(k);
      e.hi = m.x()(k);
      e.any = true;
    }
  return e;
}

struct ModelDiff {
  bool any = false;
  double max_abs = 0.0, at = 0.0, rms = 0.0;
};

ModelDiff model_difference(const Mesh& m, const InversionResult& r) {
  ModelDiff d;
  if (r.v_xc_model.empty() || r.v_xc.empty()) return d;
  double sw = 0.0, s2 = 0.0;
  for (std::size_t s = 0; s < r.v_xc.size(); ++s)
    for (int k = 0; k < m.num_nodes(); ++k) {
      if (!r.trusted[k]) continue;
      const double e = std::abs(r.v_xc[s](k) - r.v_xc_model[s](k));
      if (e > d.max_abs) {
        d.max_abs = e;
        d.at = m.x()(k);
      }
      const double w = m.density_weight()(k) * r.target[s](k);
      sw += w;
      s2 += w * e * e;
      d.any = true;
    }
  d.rms = sw > 0 ? std::sqrt(s2 / sw) : 0.0;
  return d;
}

void require_finite(double v, const char* what) {
  if (!std::isfinite(v)) throw NumericalError(std::string("refusing to write a non-finite ") + what);
}

}  // namespace

InvertInput parse_invert_input(const std::string& text, const std::string& name) {
  return parse_root(detail::parse_toml(text, name), name);
}

InvertInput read_invert_input(const std::string& path) {
  return parse_invert_input(detail::read_text_file(path, "cannot open input file"), path);
}

std::string format_inversion(const InvertInput& in, const TargetDensity& t, const InversionResult& r) {
  const Mesh m = in.system.geometry == Geometry::Radial ? Mesh::radial(in.system.grid, in.system.atom.Z)
                                                        : Mesh::line(in.system.grid);
  const bool radial = m.geometry() == Geometry::Radial;
  const InversionOptions& o = in.options;
  std::ostringstream out;
  char buf[256];
  out << "system " << in.system.name << ": Kohn-Sham inversion (" << form_name(o) << " form, "
      << (o.method == InversionOptions::Method::WuYang ? "Wu-Yang Newton" : "direct minimization, Gauss-Newton-Krylov")
      << ")  [hartree, bohr]\n";
  out << "  target      " << t.source << (t.exact_nodes ? " (on the grid nodes)" : " (interpolated)") << "\n";
  out << "  grid        " << m.describe() << "\n";
  out << "  reference   potential " << reference_potential_name(o) << "; constant by "
      << (o.constant == InversionOptions::Constant::Asymptotic ? "the asymptotic condition (v_s -> reference potential at the grid edge)"
                : o.spin_ionization_energies.size() == 2
                    ? "the ionization energies per spin I_up = " + g6(o.spin_ionization_energies[0]) +
                          " Ha, I_down = " + g6(o.spin_ionization_energies[1]) + " Ha"
                    : "the ionization energy I = " + g6(o.ionization_energy) + " Ha")
      << "\n";
  std::snprintf(buf, sizeof buf, "  converged   %d iterations, regularization alpha = %.3e (%s)\n", r.iterations,
                r.regularization, o.regularization == 0.0 ? "automatic" : "fixed");
  out << buf;
  std::snprintf(buf, sizeof buf, "  density     int |n - n_t| = %.3e electrons, max |n - n_t| = %.3e per bohr%s\n", r.density_l1,
                r.density_max, radial ? "^3" : "");
  out << buf;
  const Extent e = trusted_extent(m, r);
  if (e.any) {
    if (radial)
      std::snprintf(buf, sizeof buf, "  trusted     r <= %.3f bohr (target density > %.1e); beyond, the regularization sets v\n",
                    e.hi, o.trust_threshold);
    else
      std::snprintf(buf, sizeof buf,
                    "  trusted     x in [%.3f, %.3f] bohr (target density > %.1e); beyond, the regularization sets v\n", e.lo,
                    e.hi, o.trust_threshold);
    out << buf;
  } else {
    out << "  trusted     nowhere: the target never exceeds the trust threshold\n";
  }
  std::snprintf(buf, sizeof buf, "  HOMO        %.9f Ha\n", r.homo);
  out << buf;
  if (!radial && r.tail_mismatch > 1e-6) {
    std::snprintf(buf, sizeof buf, "  tails       v_s - reference potential differs by %.2e Ha between the two edges\n", r.tail_mismatch);
    out << buf;
  }
  const ModelDiff d = model_difference(m, r);
  if (d.any) {
    std::snprintf(buf, sizeof buf, "  model v_xc  %s: max |difference| %.3e Ha at %s = %.3f bohr, density-weighted rms %.3e Ha (trusted region)\n",
                  r.model_functional.c_str(), d.max_abs, radial ? "r" : "x", d.at, d.rms);
    out << buf;
  }
  out << "  levels (hartree)\n    state  spin  occupation          energy\n";
  const int ns = static_cast<int>(r.v_s.size());
  for (const Level& lv : r.levels) {
    std::snprintf(buf, sizeof buf, "    %-5s  %-4s  %10.6f  %14.9f\n", lv.label.c_str(), spin_label(ns, lv.spin).c_str(),
                  lv.occupation, lv.energy);
    out << buf;
  }
  return out.str();
}

std::string inversion_json(const InvertInput& in, const TargetDensity& t, const InversionResult& r) {
  using nlohmann::json;
  const SystemSpec& s = in.system;
  const InversionOptions& o = in.options;
  const Mesh m = s.geometry == Geometry::Radial ? Mesh::radial(s.grid, s.atom.Z) : Mesh::line(s.grid);
  const bool radial = m.geometry() == Geometry::Radial;
  for (double v : {r.density_l1, r.density_max, r.regularization, r.homo, r.tail_mismatch}) require_finite(v, "number");
  json j;
  j["units"] = {{"energy", "hartree"},
                {"length", "bohr"},
                {"density", radial ? "electrons/bohr^3" : "electrons/bohr"},
                {"potential", "hartree"}};
  j["system"] = {{"name", s.name}, {"kind", radial ? "atom" : "line"}, {"electrons", s.electron_count()}};
  if (radial) {
    j["system"]["Z"] = s.atom.Z;
    j["system"]["element"] = element_symbol(s.atom.Z);
    j["system"]["configuration"] = format_configuration(s.atom.configuration);
  }
  j["grid"] = {{"preset", s.grid_name}, {"description", m.describe()}, {"nodes", m.num_nodes()}};
  j["target"] = {{"file", t.source},
                 {"on_grid_nodes", t.exact_nodes},
                 {"electrons_in_table", t.electrons_in_table},
                 {"normalization_factor", t.scale},
                 {"warnings", t.warnings}};
  if (!t.position_column.empty()) j["target"]["columns"] = t.position_column + "," + t.density_columns;
  j["form"] = form_name(o);
  j["method"] = method_name(o);
  j["reference_potential"] = reference_potential_name(o);
  json c = {{"kind", o.constant == InversionOptions::Constant::Asymptotic ? "asymptotic" : "ionization"},
            {"shift_per_spin", r.shift}};
  if (o.constant == InversionOptions::Constant::Ionization) {
    if (o.spin_ionization_energies.empty())
      c["ionization_energy"] = o.ionization_energy;
    else
      c["ionization_energy_per_spin"] = o.spin_ionization_energies;
  }
  if (!radial) c["tail_mismatch"] = r.tail_mismatch;
  j["constant"] = c;
  j["regularization"] = {{"alpha", r.regularization},
                         {"mode", o.regularization == 0.0 ? "automatic" : "fixed"},
                         {"penalty", "(alpha/2) * integral |grad(v - v_reference)|^2, per spin"}};
  j["density_error"] = {{"integrated_absolute", r.density_l1},
                        {"maximum", r.density_max},
                        {"tolerance", o.density_tolerance}};
  j["iterations"] = r.iterations;
  json hist = json::array();
  for (const InversionStep& st : r.history) {
    json h = {{"iteration", st.iteration},     {"regularization", st.regularization}, {"objective", st.objective},
              {"density_l1", st.density_l1}, {"density_max", st.density_max},       {"step", st.step}};
    if (o.method == InversionOptions::Method::Direct) h["cg_iterations"] = st.krylov_iterations;
    hist.push_back(h);
  }
  j["history"] = hist;
  const Extent e = trusted_extent(m, r);
  int count = 0;
  for (bool b : r.trusted) count += b;
  j["trusted"] = {{"threshold", o.trust_threshold}, {"nodes", count}};
  if (e.any) {
    if (radial)
      j["trusted"]["r_max"] = e.hi;
    else
      j["trusted"]["x_range"] = {e.lo, e.hi};
  }
  j["homo"] = r.homo;
  json levels = json::array();
  const int ns = static_cast<int>(r.v_s.size());
  for (const Level& lv : r.levels) {
    require_finite(lv.energy, "eigenvalue");
    levels.push_back({{"label", lv.label},
                      {"spin", spin_label(ns, lv.spin)},
                      {"l", lv.l},
                      {"occupation", lv.occupation},
                      {"energy", lv.energy}});
  }
  j["levels"] = levels;
  const ModelDiff d = model_difference(m, r);
  if (d.any)
    j["model_comparison"] = {{"functional", r.model_functional},
                             {"region", "trusted nodes"},
                             {"max_abs_difference", d.max_abs},
                             {"at", d.at},
                             {"density_weighted_rms", d.rms}};
  j["seconds"] = r.seconds;
  return j.dump(2) + "\n";
}

namespace {

std::vector<std::string> csv_header(const InvertInput& in, const InversionResult& r) {
  const bool radial = in.system.geometry == Geometry::Radial;
  const int ns = static_cast<int>(r.v_s.size());
  const std::string nu = radial ? "_per_bohr3" : "_per_bohr";
  auto spin = [&](const std::string& base, int s, const std::string& unit) {
    return ns == 1 ? base + unit : base + (s == 0 ? "_up" : "_down") + unit;
  };
  std::vector<std::string> h{radial ? "r_bohr" : "x_bohr"};
  for (int s = 0; s < ns; ++s) h.push_back(spin("n_target", s, nu));
  for (int s = 0; s < ns; ++s) h.push_back(spin("n_reconstructed", s, nu));
  for (int s = 0; s < ns; ++s) h.push_back(spin("n_error", s, nu));
  h.push_back("trusted");
  for (int s = 0; s < ns; ++s) h.push_back(spin("v_s", s, "_hartree"));
  h.push_back("v_reference_hartree");
  h.push_back("v_ext_hartree");
  if (!r.v_xc.empty() || in.options.reference_potential != InversionOptions::ReferencePotential::ExternalOnly) h.push_back("v_h_target_hartree");
  for (std::size_t s = 0; s < r.v_hxc.size(); ++s) h.push_back(spin("v_hxc", static_cast<int>(s), "_hartree"));
  for (std::size_t s = 0; s < r.v_xc.size(); ++s) h.push_back(spin("v_xc", static_cast<int>(s), "_hartree"));
  for (std::size_t s = 0; s < r.v_xc_model.size(); ++s) h.push_back(spin("v_xc_model", static_cast<int>(s), "_hartree"));
  h.push_back("quadrature_weight");
  return h;
}

int column_of(const std::vector<std::string>& h, const std::string& name) {
  for (std::size_t i = 0; i < h.size(); ++i)
    if (h[i] == name) return static_cast<int>(i) + 1;
  return 0;
}

}  // namespace

std::string inversion_csv(const InvertInput& in, const InversionResult& r) {
  const SystemSpec& s = in.system;
  const Mesh m = s.geometry == Geometry::Radial ? Mesh::radial(s.grid, s.atom.Z) : Mesh::line(s.grid);
  const bool radial = m.geometry() == Geometry::Radial;
  const int ns = static_cast<int>(r.v_s.size());
  std::ostringstream o;
  o << "# " << s.name << ": Kohn-Sham inversion (" << method_name(in.options) << ", " << form_name(in.options) << "); "
    << (radial ? "r" : "x") << " in bohr, densities in electrons/" << (radial ? "bohr^3" : "bohr")
    << ", potentials in hartree. trusted = 1 where the target density exceeds " << g6(in.options.trust_threshold)
    << "; elsewhere the potential is set by the regularization and the reference potential, not by the data.\n";
  const std::vector<std::string> h = csv_header(in, r);
  for (std::size_t i = 0; i < h.size(); ++i) o << (i ? "," : "") << h[i];
  o << "\n";
  const bool with_h = !r.v_xc.empty() || in.options.reference_potential != InversionOptions::ReferencePotential::ExternalOnly;
  for (int k = radial ? 1 : 0; k < m.num_nodes(); ++k) {
    std::vector<double> row{m.x()(k)};
    for (int sp = 0; sp < ns; ++sp) row.push_back(r.target[sp](k));
    for (int sp = 0; sp < ns; ++sp) row.push_back(r.density[sp](k));
    for (int sp = 0; sp < ns; ++sp) row.push_back(r.density[sp](k) - r.target[sp](k));
    row.push_back(r.trusted[k] ? 1.0 : 0.0);
    for (int sp = 0; sp < ns; ++sp) row.push_back(r.v_s[sp](k));
    row.push_back(r.v_reference[0](k));
    row.push_back(r.v_ext(k));
    if (with_h) row.push_back(r.v_h(k));
    for (const auto& v : r.v_hxc) row.push_back(v(k));
    for (const auto& v : r.v_xc) row.push_back(v(k));
    for (const auto& v : r.v_xc_model) row.push_back(v(k));
    row.push_back(m.density_weight()(k));
    for (std::size_t i = 0; i < row.size(); ++i) {
      require_finite(row[i], "table value");
      if (i) o << ",";
      o << (h[i] == "trusted" ? (row[i] > 0.5 ? "1" : "0") : num(row[i]));
    }
    o << "\n";
  }
  return o.str();
}

std::string inversion_gnuplot(const InvertInput& in, const InversionResult& r, const std::string& csv_name,
                              const std::string& png_name, const std::string& svg_name) {
  const SystemSpec& s = in.system;
  const Mesh m = s.geometry == Geometry::Radial ? Mesh::radial(s.grid, s.atom.Z) : Mesh::line(s.grid);
  const bool radial = m.geometry() == Geometry::Radial;
  const std::vector<std::string> h = csv_header(in, r);
  const int ns = static_cast<int>(r.v_s.size());
  const int cx = 1, ctr = column_of(h, "trusted");
  const Extent e = trusted_extent(m, r);
  double lo, hi;
  if (radial) {
    lo = m.x()(1);
    hi = e.any ? std::min(m.x()(m.num_nodes() - 1), 2.0 * e.hi) : m.x()(m.num_nodes() - 1);
  } else {
    const double span = e.any ? e.hi - e.lo : 2.0 * s.grid.half_width;
    lo = e.any ? std::max(m.x()(0), e.lo - 0.5 * span) : m.x()(0);
    hi = e.any ? std::min(m.x()(m.num_nodes() - 1), e.hi + 0.5 * span) : m.x()(m.num_nodes() - 1);
  }
  const std::string X = radial ? "r (bohr)" : "x (bohr)";
  std::ostringstream g;
  g << "# gnuplot script written by stillpoint invert for system " << s.name << "\n"
    << "# Upper panel: potentials in hartree (solid where trusted, thin dashed where the regularization sets them).\n"
    << "# Lower panel: |n - n_t| and the target density.\n"
    << "set datafile separator ','\n"
    << "set datafile missing 'NaN'\n"
    << "tr(v) = (column(" << ctr << ") > 0.5 ? v : NaN)\n"
    << "nz(v) = (abs(v) > 0 ? abs(v) : NaN)\n"
    << "do for [fmt in 'png svg'] {\n"
    << "  if (fmt eq 'png') {\n"
    << "    if (strstrt(GPVAL_TERMINALS, 'pngcairo') > 0) { set terminal pngcairo size 900,900 font 'Sans,10' } "
       "else { set terminal png size 900,900 }\n"
    << "    set output '" << png_name << "'\n"
    << "  } else {\n"
    << "    set terminal svg size 900,900 dynamic font 'Sans,11'\n"
    << "    set output '" << svg_name << "'\n"
    << "  }\n"
    << "  set termoption noenhanced\n"
    << "  set multiplot layout 2,1 title '" << s.name << ": Kohn-Sham inversion (" << method_name(in.options) << ", "
    << form_name(in.options) << "), hartree atomic units'\n"
    << "  unset logscale\n"
    << (radial ? "  set logscale x\n" : "")
    << "  set xrange [" << lo << ":" << hi << "]\n"
    << "  set xlabel '" << X << "'\n"
    << "  set grid\n"
    << "  set key bottom right\n"
    << "  set offsets 0, 0, graph 0.05, graph 0.05\n";
  // Grey where the target density is below the trust threshold: there v is set by the
  // regularization and the reference potential, not by the data.
  if (e.any) {
    int id = 1;
    if (!radial && e.lo > lo)
      g << "  set object " << id++ << " rect from " << lo << ", graph 0 to " << e.lo
        << ", graph 1 behind fillcolor rgb '#e8e8e8' fillstyle solid noborder\n";
    if (e.hi < hi)
      g << "  set object " << id++ << " rect from " << e.hi << ", graph 0 to " << hi
        << ", graph 1 behind fillcolor rgb '#e8e8e8' fillstyle solid noborder\n";
    g << "  set label 1 'grey: density below " << g6(in.options.trust_threshold)
      << ", potential set by the regularization' at graph 0.02, graph 0.96 left\n";
  }
  std::vector<std::string> plots;
  auto add = [&](int col, const std::string& title, int width, const std::string& color) {
    const std::string c = " lc rgb '" + color + "'";
    plots.push_back("'" + csv_name + "' using " + std::to_string(cx) + ":(tr(column(" + std::to_string(col) +
                    "))) with lines lw " + std::to_string(width) + c + " title '" + title + "'");
    plots.push_back("'" + csv_name + "' using " + std::to_string(cx) + ":" + std::to_string(col) + " with lines lw 1 dt 2" + c +
                    " notitle");
  };
  if (!r.v_xc.empty()) {
    g << "  set ylabel 'v_xc (hartree)'\n";
    for (int sp = 0; sp < ns; ++sp) {
      const std::string suf = ns == 1 ? "" : (sp == 0 ? "_up" : "_down");
      add(column_of(h, "v_xc" + suf + "_hartree"), "v_xc reconstructed" + std::string(ns == 1 ? "" : (sp == 0 ? " up" : " down")),
          3, sp == 0 ? "#1f77b4" : "#2ca02c");
      if (!r.v_xc_model.empty())
        add(column_of(h, "v_xc_model" + suf + "_hartree"), "v_xc of " + r.model_functional + " on n_t", 1,
            sp == 0 ? "#d62728" : "#ff7f0e");
    }
  } else {
    g << "  set ylabel 'potential (hartree)'\n";
    for (int sp = 0; sp < ns; ++sp) {
      const std::string suf = ns == 1 ? "" : (sp == 0 ? "_up" : "_down");
      add(column_of(h, "v_s" + suf + "_hartree"), "v_s reconstructed" + std::string(ns == 1 ? "" : (sp == 0 ? " up" : " down")),
          3, sp == 0 ? "#1f77b4" : "#2ca02c");
    }
    add(column_of(h, "v_reference_hartree"), "reference potential", 1, "#7f7f7f");
  }
  g << "  plot ";
  for (std::size_t i = 0; i < plots.size(); ++i) g << (i ? ", \\\n       " : "") << plots[i];
  g << "\n";
  g << "  unset label 1\n  set logscale y\n  set format y '1e%L'\n  set ylabel 'density (electrons/" << (radial ? "bohr^3" : "bohr")
    << ")'\n  set key top right\n  plot ";
  for (int sp = 0; sp < ns; ++sp) {
    const std::string suf = ns == 1 ? "" : (sp == 0 ? "_up" : "_down");
    const std::string nu = radial ? "_per_bohr3" : "_per_bohr";
    if (sp) g << ", \\\n       ";
    g << "'" << csv_name << "' using 1:(nz(column(" << column_of(h, "n_error" + suf + nu) << "))) with lines lw 2 title '|n - n_t|"
      << (ns == 1 ? "" : (sp == 0 ? " up" : " down")) << "', \\\n       '" << csv_name << "' using 1:(nz(column("
      << column_of(h, "n_target" + suf + nu) << "))) with lines lw 1 lc rgb '#7f7f7f' title 'n_t" << (ns == 1 ? "" : (sp == 0 ? " up" : " down")) << "'";
  }
  g << "\n  unset logscale y\n  set format y '%g'\n  unset multiplot\n  unset output\n}\n";
  return g.str();
}

}  // namespace stillpoint
