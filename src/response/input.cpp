#include "stillpoint/response/input.hpp"

#include <toml++/toml.h>

#include <algorithm>
#include <filesystem>
#include <fstream>

#include "response/dataset.hpp"
#include "response/input_detail.hpp"
#include "common/toml_input.hpp"
#include "ks/input_detail.hpp"
#include "numerics/interpolation.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/external_potential.hpp"
#include "stillpoint/xc/formula.hpp"

namespace stillpoint {

namespace {

using detail::concat;
using detail::key_location;
using detail::location;
using detail::number_key;
using detail::string_key;

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

void read_parameters(detail::GradParsed& parsed, const std::string& file, const toml::node& node,
                     const detail::GradReadExtras& extras) {
  GradInput& g = parsed.input;
  const toml::array* arr = node.as_array();
  if (!arr) throw InputError(location(file, node, "parameter"), "use [[parameter]] tables");
  int i = 0;
  for (const auto& e : *arr) {
    const std::string path = "parameter[" + std::to_string(i++) + "]";
    const toml::table* t = e.as_table();
    if (!t) throw InputError(location(file, e, path), "expected a table");
    // Parameters of this block, whichever branch below adds them.
    struct BlockMark {
      detail::GradParsed& p;
      const toml::table* t;
      std::size_t before;
      ~BlockMark() {
        p.parameter_blocks.push_back(t);
        p.block_of.resize(p.input.parameters.size(), static_cast<int>(p.parameter_blocks.size()) - 1);
      }
    } mark{parsed, t, g.parameters.size()};
    detail::check_keys(file, *t, path,
                       concat({"kind", "system", "term", "index", "fields", "name", "lower", "upper"}, extras.parameter_keys),
                       /*list_valid=*/false);
    ParameterRef base;
    const std::string kind = string_key(file, *t, path, "kind", "");
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
      throw InputError(key_location(file, *t, path, "kind"),
                       "kind must be xc_weight, xc_parameter, gaussian, harmonic, nucleus or grid_potential");
    }
    if (const toml::node* s = t->get("system")) base.system = system_index(g, file, *s, path + ".system");
    const std::string sys_name = base.system >= 0 ? g.base.systems[base.system].name : "all";
    base.lower = number_key(file, *t, path, "lower", base.lower);
    base.upper = number_key(file, *t, path, "upper", base.upper);
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
        base.name = string_key(file, *t, path, "name", "w_" + ref.xc[base.index]);
        g.parameters.push_back(base);
        continue;
      }
      // Model or formula parameters, by name.
      SystemSpec probe = ref;
      ParameterRef first = base;
      first.sub = 0;
      first.name = ref.xc[base.index];
      first.system = -1;  // probe is the only system in the list below
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
      const std::string prefix = string_key(file, *t, path, "name", ref.xc[base.index]);
      for (const auto& fname : fields) {
        ParameterRef p = base;
        p.sub = static_cast<int>(std::find(pnames.begin(), pnames.end(), fname) - pnames.begin());
        p.field = fname;
        p.name = prefix + "." + fname;
        g.parameters.push_back(p);
      }
      continue;
    }
    if (base.kind == ParameterRef::Kind::GridPotential) {
      if (base.system < 0 && g.base.systems.size() > 1)
        throw InputError(location(file, *t, path + ".system"), "grid_potential needs system = \"name\"");
      const Mesh mesh = mesh_of(ref);
      const std::string prefix = string_key(file, *t, path, "name", "v");
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
    if (ref.geometry != Geometry::Line)
      throw InputError(location(file, *t, path + ".kind"), "gaussian, harmonic and nucleus parameters need line systems");
    const toml::node* in = t->get("index");
    base.index = in ? static_cast<int>(in->value<int64_t>().value_or(-1)) : 0;
    base.where = key_location(file, *t, path, "index");
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
    const std::string prefix = string_key(file, *t, path, "name", kind + std::to_string(base.index));
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


std::vector<std::string> split_fields(const std::string& line) {
  std::vector<std::string> out;
  std::string cur;
  for (char ch : line) {
    if (ch == ',' || ch == ' ' || ch == '\t' || ch == '\r') {
      if (!cur.empty()) out.push_back(cur);
      cur.clear();
    } else {
      cur += ch;
    }
  }
  if (!cur.empty()) out.push_back(cur);
  return out;
}

// Two columns of a CSV table: position (first column) and the named (or second) column.
ExternalTerm read_table_columns(const std::string& path, const std::vector<std::string>& value_names, const char* what) {
  std::istringstream in = detail::open_table(path, std::string("cannot open the ") + what + " table");
  ExternalTerm t;
  t.kind = ExternalTerm::Kind::Table;
  t.source = path;
  std::string line;
  int lineno = 0;
  std::size_t col = 1;
  bool header_seen = false;
  while (std::getline(in, line)) {
    ++lineno;
    const auto first = line.find_first_not_of(" \t\r");
    if (first == std::string::npos || line[first] == '#') continue;
    const auto f = split_fields(line);
    if (!header_seen && t.table_x.empty() && std::isalpha(static_cast<unsigned char>(line[first]))) {
      header_seen = true;
      for (std::size_t c = 1; c < f.size(); ++c)
        if (std::find(value_names.begin(), value_names.end(), f[c]) != value_names.end()) {
          col = c;
          break;
        }
      continue;
    }
    SourceLocation where{path, lineno, 0, ""};
    if (f.size() <= col) throw InputError(where, "expected at least " + std::to_string(col + 1) + " columns");
    double x = 0.0, v = 0.0;
    try {
      std::size_t used = 0;
      x = std::stod(f[0], &used);
      if (used != f[0].size()) throw std::invalid_argument("x");
      v = std::stod(f[col], &used);
      if (used != f[col].size()) throw std::invalid_argument("v");
    } catch (const std::exception&) {
      throw InputError(where, "expected numbers (position in bohr, then the values)");
    }
    if (!std::isfinite(x) || !std::isfinite(v)) throw InputError(where, "non-finite value");
    if (!t.table_x.empty() && x <= t.table_x.back()) throw InputError(where, "positions must be strictly ascending");
    t.table_x.push_back(x);
    t.table_v.push_back(v);
  }
  if (t.table_x.size() < 2) throw InputError(SourceLocation{path, 0, 0, ""}, std::string("a ") + what + " table needs at least two rows");
  t.table_m = detail::NaturalSpline(t.table_x, t.table_v).second_derivatives();
  return t;
}

}  // namespace

std::vector<double> detail::density_on_mesh(const std::string& path, const SystemSpec& s, std::vector<std::string>& warnings,
                                            bool density) {
  const ExternalTerm table =
      read_table_columns(path, {"n", "density", "n_per_bohr", "n_per_bohr3"}, "density");
  if (density) {
    // A density is non-negative; rounding may leave tiny negative tails, not more.
    double peak = 0.0;
    for (double v : table.table_v) peak = std::max(peak, v);
    for (std::size_t i = 0; i < table.table_v.size(); ++i)
      if (!(peak > 0) || table.table_v[i] < -1e-8 * peak)
        throw InputError(SourceLocation{path, 0, 0, ""},
                         peak > 0 ? "the density is negative (" + detail::format_number(table.table_v[i], 4) + ") at " +
                                        detail::format_number(table.table_x[i], 6) +
                                        " bohr, more than 1e-8 of its maximum " + detail::format_number(peak, 4)
                                  : std::string("the density is nowhere positive"));
  }
  const Mesh mesh = mesh_of(s);
  std::vector<double> out(mesh.num_nodes(), 0.0);
  bool beyond = false;
  // Tables written by `solve --output` carry the node positions to 13 significant digits: a
  // node that far outside an end row is that row, not a gap in the reference.
  const double lo = table.table_x.front(), hi = table.table_x.back();
  const double slack = 1e-9 * std::max({1.0, std::abs(lo), std::abs(hi)});
  for (int k = 0; k < mesh.num_nodes(); ++k) {
    double x = mesh.x()(k);
    if (x < lo && x >= lo - slack) x = lo;
    if (x > hi && x <= hi + slack) x = hi;
    if (x < lo || x > hi) {
      // No reference there: zero density. Nodes without quadrature weight (r = 0) take the
      // nearest tabulated value, which only matters for plots.
      if (mesh.density_weight()(k) == 0.0) out[k] = table.value(x);
      else beyond = true;
      continue;
    }
    out[k] = table.value(x);
  }
  double peak = 0.0;
  for (double v : table.table_v) peak = std::max(peak, std::abs(v));
  const double edge = std::max(std::abs(table.table_v.front()), std::abs(table.table_v.back()));
  if (beyond && edge > 1e-6 * peak) {
    char buf[400];
    std::snprintf(buf, sizeof buf,
                  "reference density %s does not cover the density of '%s': the table stops at [%g, %g] bohr where "
                  "it is still %.2g of its maximum, and is taken as zero beyond",
                  path.c_str(), s.name.c_str(), table.table_x.front(), table.table_x.back(), edge / peak);
    warnings.push_back(buf);
  }
  return out;
}

namespace {

void read_loss(detail::GradParsed& parsed, const std::string& file, const toml::node& node,
               const detail::GradReadExtras& extras) {
  GradInput& g = parsed.input;
  const toml::array* arr = node.as_array();
  if (!arr) throw InputError(location(file, node, "loss"), "use [[loss]] tables");
  int i = 0;
  for (const auto& e : *arr) {
    const std::string path = "loss[" + std::to_string(i++) + "]";
    const toml::table* t = e.as_table();
    if (!t) throw InputError(location(file, e, path), "expected a table");
    detail::check_keys(file, *t, path,
                       concat({"kind", "system", "minus", "reference", "region", "state", "spin", "target", "weight", "name"},
                              extras.loss_keys),
                       /*list_valid=*/false);
    LossTerm L;
    const std::string kind = string_key(file, *t, path, "kind", "");
    const toml::node* sn = t->get("system");
    if (sn)
      L.system = system_index(g, file, *sn, path + ".system");
    else if (g.base.systems.size() == 1)
      L.system = 0;
    else
      throw InputError(location(file, *t, path + ".system"), "name the system this term is about");
    L.weight = number_key(file, *t, path, "weight", 1.0);
    if (t->contains("target")) L.target = number_key(file, *t, path, "target", 0.0);
    L.name = string_key(file, *t, path, "name", kind + ":" + g.base.systems[L.system].name);
    if (kind == "density") {
      L.kind = LossTerm::Kind::Density;
      const std::string ref = string_key(file, *t, path, "reference", "");
      if (ref.empty()) throw InputError(location(file, *t, path + ".reference"), "a density term needs reference = \"file.csv\"");
      std::filesystem::path rp(ref);
      if (rp.is_relative()) rp = std::filesystem::path(file).parent_path() / rp;
      if (!std::filesystem::exists(rp)) throw InputError(location(file, *t->get("reference"), path + ".reference"), "file not found: " + rp.string());
      const SystemSpec& s = g.base.systems[L.system];
      try {
        L.reference = detail::density_on_mesh(rp.string(), s, g.warnings, /*density=*/true);
      } catch (const InputError& err) {
        if (!err.where().file.empty()) throw;
        throw InputError(location(file, *t->get("reference"), path + ".reference"), err.what());
      }
      if (const toml::node* rn = t->get("region")) {
        const toml::array* ra = rn->as_array();
        if (!ra || ra->size() != 2) throw InputError(location(file, *rn, path + ".region"), "expected [x_min, x_max] in bohr");
        const double lo = (*ra)[0].value<double>().value_or(0.0), hi = (*ra)[1].value<double>().value_or(0.0);
        const Mesh mesh = mesh_of(s);
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
      L.state = string_key(file, *t, path, "state", "homo");
      L.where = key_location(file, *t, path, "state");
      const std::string spin = string_key(file, *t, path, "spin", "up");
      if (spin != "up" && spin != "down") throw InputError(location(file, *t->get("spin"), path + ".spin"), "spin must be up or down");
      L.spin = spin == "up" ? 0 : 1;
    } else {
      throw InputError(key_location(file, *t, path, "kind"),
                       "kind must be density, energy, eigenvalue or energy_difference");
    }
    g.loss.push_back(L);
    parsed.loss_tables.push_back(t);
  }
}

// initial_model = "fitted-model.toml": every parameter starts from its value in that file (a
// `solve` input, as `fit` writes it), taken from the system of the same name. Grid potentials
// come from SYSTEM_grid_potential.csv beside it.
void apply_initial_model(detail::GradParsed& parsed, const std::string& file, const toml::node& node) {
  GradInput& g = parsed.input;
  const SourceLocation at = location(file, node, "initial_model");
  auto name = node.value<std::string>();
  if (!name) throw InputError(at, "expected the path of a fitted-model file (a solve input written by fit)");
  std::filesystem::path mp(*name);
  if (mp.is_relative()) mp = std::filesystem::path(file).parent_path() / mp;
  if (!std::filesystem::exists(mp)) throw InputError(at, "file not found: " + mp.string());
  const SolveInput model = read_solve_input(mp.string());
  auto model_system = [&](const std::string& sys) -> const SystemSpec* {
    for (const SystemSpec& m : model.systems)
      if (m.name == sys) return &m;
    return nullptr;
  };
  Eigen::VectorXd theta = parameter_values(g.base.systems, g.parameters);
  for (std::size_t i = 0; i < g.parameters.size(); ++i) {
    const ParameterRef& p = g.parameters[i];
    // The workflow system whose model counterpart supplies the value.
    const SystemSpec* ws = nullptr;
    const SystemSpec* ms = nullptr;
    for (std::size_t s = 0; s < g.base.systems.size() && !ms; ++s) {
      if (p.system >= 0 && static_cast<int>(s) != p.system) continue;
      ws = &g.base.systems[s];
      ms = model_system(ws->name);
    }
    if (!ms)
      throw InputError(at, "parameter '" + p.name + "': " + mp.string() + " has no system named " +
                               (p.system >= 0 ? "'" + g.base.systems[p.system].name + "'" : "like any system of this file"));
    const bool xc = p.kind == ParameterRef::Kind::XcWeight || p.kind == ParameterRef::Kind::XcParameter;
    if (xc && (p.index >= static_cast<int>(ms->xc.size()) || ms->xc[p.index] != ws->xc[p.index]))
      throw InputError(at, "parameter '" + p.name + "': system '" + ms->name + "' of " + mp.string() +
                               " has a different xc list");
    if (p.kind == ParameterRef::Kind::GridPotential) {
      const std::filesystem::path gp = mp.parent_path() / (ms->name + "_grid_potential.csv");
      if (!std::filesystem::exists(gp))
        throw InputError(at, "parameter '" + p.name + "': " + gp.string() + " (the fitted grid potential) is missing");
      const ExternalTerm table = read_table_columns(gp.string(), {"v_hartree", "v_grid_hartree"}, "grid potential");
      theta(i) = table.value(mesh_of(*ws).x()(p.index));
      continue;
    }
    ParameterRef one = p;
    one.system = -1;
    try {
      theta(i) = parameter_values({*ms}, {one})(0);
    } catch (const InputError& e) {
      throw InputError(at, "parameter '" + p.name + "' in " + mp.string() + ": " + e.what());
    }
  }
  g.base.systems = apply_parameters(g.base.systems, g.parameters, theta);
}

}  // namespace

namespace detail {

GradParsed parse_grad_root(const toml::table& root, const std::string& file, const GradReadExtras& extras) {
  GradParsed parsed;
  GradInput& g = parsed.input;
  std::vector<std::string> top{"parameter", "loss", "initial_model"};
  if (extras.grad_table) top.push_back("grad");
  g.base = detail::parse_solve_root(root, file, concat(top, extras.top_keys));
  g.options.scf = g.base.scf;
  g.options.density_threshold = g.base.density_threshold;
  if (const toml::node* gn = extras.grad_table ? root.get("grad") : nullptr) {
    const toml::table* t = gn->as_table();
    if (!t) throw InputError(location(file, *gn, "grad"), "expected a [grad] table");
    detail::check_keys(file, *t, "grad",
                       {"mode", "verify", "verify_tolerance", "verify_floor", "verify_step", "chi0", "krylov_tolerance"},
                       /*list_valid=*/false);
    const std::string mode = string_key(file, *t, "grad", "mode", "adjoint");
    if (mode == "tangent")
      g.options.mode = GradientOptions::Mode::Tangent;
    else if (mode != "adjoint")
      throw InputError(location(file, *t->get("mode"), "grad.mode"), "mode must be adjoint or tangent");
    if (const toml::node* v = t->get("verify")) g.verify = v->value<bool>().value_or(false);
    g.verify_tolerance = number_key(file, *t, "grad", "verify_tolerance", g.verify_tolerance);
    g.verify_floor = number_key(file, *t, "grad", "verify_floor", g.verify_floor);
    g.verify_step = number_key(file, *t, "grad", "verify_step", g.verify_step);
    g.options.response.krylov_tolerance = number_key(file, *t, "grad", "krylov_tolerance", g.options.response.krylov_tolerance);
    if (!(g.options.response.krylov_tolerance > 0 && g.options.response.krylov_tolerance < 1))
      throw InputError(key_location(file, *t, "grad", "krylov_tolerance"),
                       "must be in (0, 1) (a relative residual of the linear-response solves)");
    const std::string chi0 = string_key(file, *t, "grad", "chi0", "auto");
    if (chi0 == "sum_over_states")
      g.options.response.chi0 = ResponseOptions::Chi0Method::SumOverStates;
    else if (chi0 == "sternheimer")
      g.options.response.chi0 = ResponseOptions::Chi0Method::Sternheimer;
    else if (chi0 != "auto")
      throw InputError(location(file, *t->get("chi0"), "grad.chi0"), "chi0 must be auto, sum_over_states or sternheimer");
  }
  const toml::node* pn = root.get("parameter");
  if (!pn) throw InputError(SourceLocation{file, 0, 0, "parameter"}, "no [[parameter]] given: nothing to differentiate");
  read_parameters(parsed, file, *pn, extras);
  if (const toml::node* mn = root.get("initial_model")) apply_initial_model(parsed, file, *mn);
  const toml::node* ln = root.get("loss");
  if (!ln) throw InputError(SourceLocation{file, 0, 0, "loss"}, "no [[loss]] given");
  read_loss(parsed, file, *ln, extras);
  return parsed;
}

void check_parameter_bounds(const GradParsed& parsed, const std::string& file, bool strictly_inside) {
  const GradInput& g = parsed.input;
  const Eigen::VectorXd v = parameter_values(g.base.systems, g.parameters);
  for (std::size_t i = 0; i < g.parameters.size(); ++i) {
    const ParameterRef& p = g.parameters[i];
    const toml::table& t = *parsed.parameter_blocks[parsed.block_of[i]];
    const std::string path = "parameter[" + std::to_string(parsed.block_of[i]) + "]";
    auto where = [&](const char* key) { return key_location(file, t, path, key); };
    if (!(p.lower < p.upper))
      throw InputError(where("upper"), "the bounds of '" + p.name + "' are empty: lower = " + std::to_string(p.lower) +
                                           " is not below upper = " + std::to_string(p.upper));
    char buf[200];
    std::snprintf(buf, sizeof buf, "the initial value %.10g of '%s' lies outside its bounds [%.10g, %.10g]", v(i),
                  p.name.c_str(), p.lower, p.upper);
    if (v(i) < p.lower) throw InputError(where("lower"), buf);
    if (v(i) > p.upper) throw InputError(where("upper"), buf);
    if (strictly_inside && (v(i) == p.lower || v(i) == p.upper))
      throw InputError(where(v(i) == p.lower ? "lower" : "upper"),
                       "parameter '" + p.name +
                           "' starts on one of its bounds; L-BFGS treats bounds by a reparametrization that needs a "
                           "start strictly inside them (move the initial value, or use levenberg_marquardt)");
  }
}

}  // namespace detail

GradInput parse_grad_input(const std::string& text, const std::string& name) {
  // Unlike the other readers, grad has never prefixed syntax errors with "TOML syntax error: ".
  toml::table root = detail::parse_toml(text, name, "");
  // A fit workflow is accepted as it is, so that `grad --verify` checks the very setup a fit
  // will use: its datasets become systems and losses, its parameters start where the fit
  // starts, and what only the optimizer needs ([fit], priors, sets, scales) is ignored.
  const bool fit_workflow = root.contains("fit") || root.contains("dataset");
  if (fit_workflow) detail::expand_datasets(root, name);
  detail::GradParsed parsed = detail::parse_grad_root(root, name, fit_workflow ? detail::fit_workflow_extras() : detail::GradReadExtras{});
  if (fit_workflow) {
    detail::apply_fit_start_values(parsed, name);
    parsed.input.warnings.insert(parsed.input.warnings.begin(),
                                 name + " is a fit workflow: [fit] and the fit-only keys of [[parameter]] and [[loss]] "
                                        "(fixed, prior, prior_weight, smoothness, scale, published, set) are ignored; "
                                        "the gradient is taken at the fit's start values, every loss term with its "
                                        "own weight (no fit normalization), training and validation alike");
  }
  detail::check_parameter_bounds(parsed, name);
  return std::move(parsed.input);
}

GradInput read_grad_input(const std::string& path) {
  return parse_grad_input(detail::read_text_file(path, "cannot open input file"), path);
}

}  // namespace stillpoint
