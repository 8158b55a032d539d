#include "stillpoint/grad_input.hpp"

#include <toml++/toml.h>

#include <algorithm>
#include <filesystem>
#include <fstream>
#include <sstream>

#include "input_detail.hpp"
#include "stillpoint/errors.hpp"
#include "stillpoint/external_potential.hpp"
#include "stillpoint/formula.hpp"

namespace stillpoint {

namespace {

using detail::location;

void check_keys(const std::string& file, const toml::table& t, const std::string& path,
                const std::vector<std::string>& allowed) {
  for (const auto& [k, v] : t) {
    const std::string key(k.str());
    if (std::find(allowed.begin(), allowed.end(), key) != allowed.end()) continue;
    const std::string near = nearest_word(key, allowed);
    throw InputError(location(file, v, path + "." + key),
                     "unknown key" + (near.empty() ? std::string() : "; did you mean '" + near + "'?"));
  }
}

int system_index(const GradInput& g, const std::string& file, const toml::node& n, const std::string& key) {
  auto name = n.value<std::string>();
  if (!name) throw InputError(location(file, n, key), "expected a system name");
  for (std::size_t i = 0; i < g.base.systems.size(); ++i)
    if (g.base.systems[i].name == *name) return static_cast<int>(i);
  std::vector<std::string> names;
  for (const auto& s : g.base.systems) names.push_back(s.name);
  const std::string near = nearest_word(*name, names);
  throw InputError(location(file, n, key),
                   "no system named '" + *name + "'" + (near.empty() ? "" : "; did you mean '" + near + "'?"));
}

double number(const std::string& file, const toml::table& t, const std::string& key, const std::string& path, double def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  auto v = n->value<double>();
  if (!v || !std::isfinite(*v)) throw InputError(location(file, *n, path + "." + key), "expected a finite number");
  return *v;
}

std::string string(const std::string& file, const toml::table& t, const std::string& key, const std::string& path,
                   const std::string& def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  auto v = n->value<std::string>();
  if (!v) throw InputError(location(file, *n, path + "." + key), "expected a string");
  return *v;
}

void read_parameters(GradInput& g, const std::string& file, const toml::node& node) {
  const toml::array* arr = node.as_array();
  if (!arr) throw InputError(location(file, node, "parameter"), "use [[parameter]] tables");
  int i = 0;
  for (const auto& e : *arr) {
    const std::string path = "parameter[" + std::to_string(i++) + "]";
    const toml::table* t = e.as_table();
    if (!t) throw InputError(location(file, e, path), "expected a table");
    check_keys(file, *t, path, {"kind", "system", "term", "index", "fields", "name", "lower", "upper"});
    ParameterRef base;
    const std::string kind = string(file, *t, "kind", path, "");
    std::vector<std::string> all_fields;
    if (kind == "xc_weight") {
      base.kind = ParameterRef::Kind::XcWeight;
      all_fields = {""};
    } else if (kind == "gaussian") {
      base.kind = ParameterRef::Kind::Gaussian;
      all_fields = {"depth", "center", "width"};
    } else if (kind == "harmonic") {
      base.kind = ParameterRef::Kind::Harmonic;
      all_fields = {"omega", "center"};
    } else if (kind == "nucleus") {
      base.kind = ParameterRef::Kind::Nucleus;
      all_fields = {"charge", "position", "softening"};
    } else if (kind == "grid_potential") {
      base.kind = ParameterRef::Kind::GridPotential;
    } else if (kind == "xc_parameter") {
      base.kind = ParameterRef::Kind::XcParameter;
    } else {
      const toml::node* kn = t->get("kind");
      throw InputError(kn ? location(file, *kn, path + ".kind") : location(file, *t, path + ".kind"),
                       "kind must be xc_weight, xc_parameter, gaussian, harmonic, nucleus or grid_potential");
    }
    if (const toml::node* s = t->get("system")) base.system = system_index(g, file, *s, path + ".system");
    const std::string sys_name = base.system >= 0 ? g.base.systems[base.system].name : "all";
    base.lower = number(file, *t, "lower", path, base.lower);
    base.upper = number(file, *t, "upper", path, base.upper);
    const SystemSpec& ref = g.base.systems[base.system >= 0 ? base.system : 0];
    if (base.kind == ParameterRef::Kind::XcWeight || base.kind == ParameterRef::Kind::XcParameter) {
      const toml::node* tn = t->get("term");
      if (!tn) throw InputError(location(file, *t, path + ".term"), "xc_weight needs term = index or functional name");
      if (auto idx = tn->value<int64_t>()) {
        base.index = static_cast<int>(*idx);
      } else if (auto nm = tn->value<std::string>()) {
        const auto it = std::find(ref.xc.begin(), ref.xc.end(), *nm);
        if (it == ref.xc.end()) throw InputError(location(file, *tn, path + ".term"), "functional '" + *nm + "' is not in the system's xc list");
        base.index = static_cast<int>(it - ref.xc.begin());
      } else {
        throw InputError(location(file, *tn, path + ".term"), "expected an index or a functional name");
      }
      if (base.index < 0 || base.index >= static_cast<int>(ref.xc.size()))
        throw InputError(location(file, *tn, path + ".term"), "no such xc term");
      if (base.kind == ParameterRef::Kind::XcWeight) {
        base.name = string(file, *t, "name", path, "w_" + ref.xc[base.index]);
        g.parameters.push_back(base);
        continue;
      }
      // Model or formula parameters, by name.
      SystemSpec probe = ref;
      ParameterRef first = base;
      first.sub = 0;
      first.name = ref.xc[base.index];
      try {
        parameter_values({probe}, {first});
      } catch (const InputError& e) {
        throw InputError(location(file, *tn, path + ".term"), e.what());
      }
      XcSettings xs;
      xs.one_dimensional = ref.geometry == Geometry::Line;
      xs.softening = ref.line.electron_softening;
      for (const FormulaSpec& fs : ref.formulas) xs.formulas.push_back(compile_formula(fs));
      const XcFunctional f = make_functional({ref.xc[base.index]}, xs,
                                             ref.xc_parameters.size() > static_cast<std::size_t>(base.index)
                                                 ? std::vector<std::vector<double>>{ref.xc_parameters[base.index]}
                                                 : std::vector<std::vector<double>>{});
      const auto pnames = f.term(0).parameter_names();
      std::vector<std::string> fields = pnames;
      if (const toml::node* fn = t->get("fields")) {
        fields.clear();
        const toml::array* fa = fn->as_array();
        if (!fa) throw InputError(location(file, *fn, path + ".fields"), "expected a list of parameter names");
        for (const auto& fe : *fa) {
          auto fs = fe.value<std::string>();
          if (!fs || std::find(pnames.begin(), pnames.end(), *fs) == pnames.end()) {
            const std::string near = fs ? nearest_word(*fs, pnames) : std::string();
            throw InputError(location(file, fe, path + ".fields"),
                             "not a parameter of " + ref.xc[base.index] + (near.empty() ? "" : "; did you mean '" + near + "'?"));
          }
          fields.push_back(*fs);
        }
      }
      const std::string prefix = string(file, *t, "name", path, ref.xc[base.index]);
      for (const auto& fname : fields) {
        ParameterRef p = base;
        p.sub = static_cast<int>(std::find(pnames.begin(), pnames.end(), fname) - pnames.begin());
        p.field = fname;
        p.name = prefix + "." + fname;
        g.parameters.push_back(p);
      }
      continue;
    }
    if (ref.geometry != Geometry::Line)
      throw InputError(location(file, *t, path + ".kind"), "external-potential parameters need line systems");
    if (base.kind == ParameterRef::Kind::GridPotential) {
      if (base.system < 0 && g.base.systems.size() > 1)
        throw InputError(location(file, *t, path + ".system"), "grid_potential needs system = \"name\"");
      const Mesh mesh = Mesh::line(ref.grid);
      const std::string prefix = string(file, *t, "name", path, "v");
      for (int k = 1; k < mesh.num_nodes() - 1; ++k) {
        ParameterRef p = base;
        p.index = k;
        char buf[64];
        std::snprintf(buf, sizeof buf, "%s[%d]", prefix.c_str(), k);
        p.name = buf;
        g.parameters.push_back(p);
      }
      continue;
    }
    const toml::node* in = t->get("index");
    base.index = in ? static_cast<int>(in->value<int64_t>().value_or(-1)) : 0;
    std::vector<std::string> fields = all_fields;
    if (const toml::node* fn = t->get("fields")) {
      fields.clear();
      const toml::array* fa = fn->as_array();
      if (!fa) throw InputError(location(file, *fn, path + ".fields"), "expected a list of field names");
      for (const auto& f : *fa) {
        auto s = f.value<std::string>();
        if (!s || std::find(all_fields.begin(), all_fields.end(), *s) == all_fields.end()) {
          std::string list;
          for (const auto& a : all_fields) list += (list.empty() ? "" : ", ") + a;
          throw InputError(location(file, f, path + ".fields"), "valid fields: " + list);
        }
        fields.push_back(*s);
      }
    }
    const std::string prefix = string(file, *t, "name", path, kind + std::to_string(base.index));
    for (const auto& f : fields) {
      ParameterRef p = base;
      p.field = f;
      p.name = prefix + "." + f + (base.system >= 0 ? "" : "");
      g.parameters.push_back(p);
    }
    (void)sys_name;
  }
  // Every parameter must resolve on its systems now, not halfway through a gradient.
  parameter_values(g.base.systems, g.parameters);
}

std::vector<double> density_on_mesh(const std::string& path, const SystemSpec& s, std::vector<std::string>& warnings) {
  ExternalTerm table = read_potential_table(path);  // two columns: x (bohr), n
  const Mesh mesh = s.geometry == Geometry::Line ? Mesh::line(s.grid) : Mesh::radial(s.grid, s.atom.Z);
  std::vector<double> out(mesh.num_nodes(), 0.0);
  bool outside = false;
  for (int k = 0; k < mesh.num_nodes(); ++k) {
    const double x = mesh.x()(k);
    if (x < table.table_x.front() || x > table.table_x.back()) {
      outside = true;
      continue;  // no reference there: zero density
    }
    out[k] = table.value(x);
  }
  if (outside)
    warnings.push_back("reference density " + path + " does not cover the whole grid of '" + s.name +
                       "'; it is taken as zero outside [" + std::to_string(table.table_x.front()) + ", " +
                       std::to_string(table.table_x.back()) + "] bohr");
  return out;
}

void read_loss(GradInput& g, const std::string& file, const toml::node& node) {
  const toml::array* arr = node.as_array();
  if (!arr) throw InputError(location(file, node, "loss"), "use [[loss]] tables");
  int i = 0;
  for (const auto& e : *arr) {
    const std::string path = "loss[" + std::to_string(i++) + "]";
    const toml::table* t = e.as_table();
    if (!t) throw InputError(location(file, e, path), "expected a table");
    check_keys(file, *t, path, {"kind", "system", "minus", "reference", "region", "state", "spin", "target", "weight", "name"});
    LossTerm L;
    const std::string kind = string(file, *t, "kind", path, "");
    const toml::node* sn = t->get("system");
    if (sn)
      L.system = system_index(g, file, *sn, path + ".system");
    else if (g.base.systems.size() == 1)
      L.system = 0;
    else
      throw InputError(location(file, *t, path + ".system"), "name the system this term is about");
    L.weight = number(file, *t, "weight", path, 1.0);
    if (t->contains("target")) L.target = number(file, *t, "target", path, 0.0);
    L.name = string(file, *t, "name", path, kind + ":" + g.base.systems[L.system].name);
    if (kind == "density") {
      L.kind = LossTerm::Kind::Density;
      const std::string ref = string(file, *t, "reference", path, "");
      if (ref.empty()) throw InputError(location(file, *t, path + ".reference"), "a density term needs reference = \"file.csv\"");
      std::filesystem::path rp(ref);
      if (rp.is_relative()) rp = std::filesystem::path(file).parent_path() / rp;
      if (!std::filesystem::exists(rp)) throw InputError(location(file, *t->get("reference"), path + ".reference"), "file not found: " + rp.string());
      const SystemSpec& s = g.base.systems[L.system];
      L.reference = density_on_mesh(rp.string(), s, g.warnings);
      if (const toml::node* rn = t->get("region")) {
        const toml::array* ra = rn->as_array();
        if (!ra || ra->size() != 2) throw InputError(location(file, *rn, path + ".region"), "expected [x_min, x_max] in bohr");
        const double lo = (*ra)[0].value<double>().value_or(0.0), hi = (*ra)[1].value<double>().value_or(0.0);
        const Mesh mesh = s.geometry == Geometry::Line ? Mesh::line(s.grid) : Mesh::radial(s.grid, s.atom.Z);
        L.region.resize(mesh.num_nodes());
        for (int k = 0; k < mesh.num_nodes(); ++k) L.region[k] = (mesh.x()(k) >= lo && mesh.x()(k) <= hi) ? 1.0 : 0.0;
      }
      if (L.target) throw InputError(location(file, *t->get("target"), path + ".target"), "a density term has no target (it is a distance)");
    } else if (kind == "energy") {
      L.kind = LossTerm::Kind::Energy;
    } else if (kind == "energy_difference") {
      L.kind = LossTerm::Kind::EnergyDifference;
      const toml::node* mn = t->get("minus");
      if (!mn) throw InputError(location(file, *t, path + ".minus"), "energy_difference needs minus = \"other system\"");
      L.system_b = system_index(g, file, *mn, path + ".minus");
    } else if (kind == "eigenvalue") {
      L.kind = LossTerm::Kind::Eigenvalue;
      L.state = string(file, *t, "state", path, "homo");
      const std::string spin = string(file, *t, "spin", path, "up");
      if (spin != "up" && spin != "down") throw InputError(location(file, *t->get("spin"), path + ".spin"), "spin must be up or down");
      L.spin = spin == "up" ? 0 : 1;
    } else {
      const toml::node* kn = t->get("kind");
      throw InputError(kn ? location(file, *kn, path + ".kind") : location(file, *t, path + ".kind"),
                       "kind must be density, energy, eigenvalue or energy_difference");
    }
    g.loss.push_back(L);
  }
}

GradInput parse_root(const toml::table& root, const std::string& file) {
  GradInput g;
  g.base = detail::parse_solve_root(root, file, {"parameter", "loss", "grad"});
  g.options.scf = g.base.scf;
  g.options.density_threshold = g.base.density_threshold;
  if (const toml::node* gn = root.get("grad")) {
    const toml::table* t = gn->as_table();
    if (!t) throw InputError(location(file, *gn, "grad"), "expected a [grad] table");
    check_keys(file, *t, "grad",
               {"mode", "verify", "verify_tolerance", "verify_floor", "verify_step", "chi0", "krylov_tolerance"});
    const std::string mode = string(file, *t, "mode", "grad", "adjoint");
    if (mode == "tangent")
      g.options.mode = GradientOptions::Mode::Tangent;
    else if (mode != "adjoint")
      throw InputError(location(file, *t->get("mode"), "grad.mode"), "mode must be adjoint or tangent");
    if (const toml::node* v = t->get("verify")) g.verify = v->value<bool>().value_or(false);
    g.verify_tolerance = number(file, *t, "verify_tolerance", "grad", g.verify_tolerance);
    g.verify_floor = number(file, *t, "verify_floor", "grad", g.verify_floor);
    g.verify_step = number(file, *t, "verify_step", "grad", g.verify_step);
    g.options.response.krylov_tolerance = number(file, *t, "krylov_tolerance", "grad", g.options.response.krylov_tolerance);
    const std::string chi0 = string(file, *t, "chi0", "grad", "auto");
    if (chi0 == "sum_over_states")
      g.options.response.chi0 = ResponseOptions::Chi0Method::SumOverStates;
    else if (chi0 == "sternheimer")
      g.options.response.chi0 = ResponseOptions::Chi0Method::Sternheimer;
    else if (chi0 != "auto")
      throw InputError(location(file, *t->get("chi0"), "grad.chi0"), "chi0 must be auto, sum_over_states or sternheimer");
  }
  const toml::node* pn = root.get("parameter");
  if (!pn) throw InputError(SourceLocation{file, 0, 0, "parameter"}, "no [[parameter]] given: nothing to differentiate");
  read_parameters(g, file, *pn);
  const toml::node* ln = root.get("loss");
  if (!ln) throw InputError(SourceLocation{file, 0, 0, "loss"}, "no [[loss]] given");
  read_loss(g, file, *ln);
  return g;
}

}  // namespace

GradInput parse_grad_input(const std::string& text, const std::string& name) {
  toml::table root;
  try {
    root = toml::parse(text, std::string{name});
  } catch (const toml::parse_error& e) {
    const auto& s = e.source();
    throw InputError(SourceLocation{name, static_cast<int>(s.begin.line), static_cast<int>(s.begin.column), ""},
                     std::string(e.description()));
  }
  return parse_root(root, name);
}

GradInput read_grad_input(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  if (!f) throw InputError(SourceLocation{path, 0, 0, ""}, "cannot open input file");
  std::stringstream ss;
  ss << f.rdbuf();
  return parse_grad_input(ss.str(), path);
}

}  // namespace stillpoint
