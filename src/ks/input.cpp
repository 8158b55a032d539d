#include "stillpoint/ks/input.hpp"

#include "common/toml_input.hpp"
#include "ks/input_detail.hpp"
#include "stillpoint/xc/formula.hpp"

#include <toml++/toml.h>

#include <algorithm>
#include <cctype>
#include <climits>
#include <cmath>
#include <filesystem>
#include <iomanip>
#include <limits>
#include <map>
#include <sstream>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/xc/functional.hpp"

namespace stillpoint {

namespace {

namespace fs = std::filesystem;

// Nuclei must stay this far (bohr) inside the box; the same margin KsProblem enforces.
constexpr double kBoxMargin = 4.0;

struct Ctx {
  std::string file;
  fs::path dir;
  GridUse use = GridUse::Banded;  // what the caller will do with the grids, for the size guard
};

// Beyond these the geometry itself is absurd: squares of positions overflow long before any
// grid could resolve them (docs/input.md).
constexpr double kMaxHalfWidth = 1e5;
constexpr double kMaxRadius = 1e4;

std::string num(double v) { return detail::format_number(v, 6); }

std::string join(const std::string& path, const std::string& key) { return path.empty() ? key : path + "." + key; }

SourceLocation at_region(const Ctx& c, const toml::source_region& s, const std::string& key) {
  return SourceLocation{c.file, static_cast<int>(s.begin.line), static_cast<int>(s.begin.column), key};
}

SourceLocation loc(const Ctx& c, const toml::node& n, const std::string& key) { return detail::location(c.file, n, key); }

SourceLocation loc_in(const Ctx& c, const toml::table& t, const std::string& path, const std::string& key) {
  return detail::key_location(c.file, t, path, key);
}

/// Errors thrown by library functions that do not know where their argument came from get
/// the input location; errors that already carry a file are passed on unchanged.
[[noreturn]] void rethrow_at(const SourceLocation& where, const InputError& e, const std::string& prefix = "") {
  if (!e.where().file.empty() && prefix.empty()) throw e;
  throw InputError(where, prefix + e.what());
}

void check_keys(const Ctx& c, const toml::table& t, const std::string& path, const std::vector<std::string>& allowed,
                const std::vector<std::string>& other = {}, const std::string& other_note = "") {
  for (const auto& [k, v] : t) {
    const std::string key(k.str());
    if (std::find(allowed.begin(), allowed.end(), key) != allowed.end()) continue;
    SourceLocation where = k.source().begin.line > 0 ? at_region(c, k.source(), join(path, key)) : loc(c, v, join(path, key));
    if (std::find(other.begin(), other.end(), key) != other.end()) throw InputError(where, other_note);
    const std::string near = nearest_word(key, allowed);
    std::string valid;
    for (const auto& a : allowed) valid += (valid.empty() ? "" : ", ") + a;
    throw InputError(where, "unknown key" + (near.empty() ? std::string() : "; did you mean '" + near + "'?") +
                                " (valid here: " + valid + ")");
  }
}

// Kept apart from detail::finite_number: solve inputs have always said "expected a number"
// for a value of the wrong type and "must be a finite number" for inf or nan.
double number_at(const Ctx& c, const toml::node& n, const std::string& key) {
  if (!n.is_number()) throw InputError(loc(c, n, key), "expected a number");
  // toml++ gives no double for an integer that a double cannot hold exactly (beyond 2^53).
  const auto v = n.value<double>();
  if (!v || !std::isfinite(*v)) throw InputError(loc(c, n, key), "must be a finite number");
  return *v;
}

double get_number(const Ctx& c, const toml::table& t, const std::string& path, const std::string& key, double def) {
  const toml::node* n = t.get(key);
  return n ? number_at(c, *n, join(path, key)) : def;
}

int get_int(const Ctx& c, const toml::table& t, const std::string& path, const std::string& key, int def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  if (const auto* i = n->as_integer()) {
    const int64_t v = i->get();
    if (v < INT_MIN || v > INT_MAX) throw InputError(loc(c, *n, join(path, key)), "integer out of range");
    return static_cast<int>(v);
  }
  if (const auto* f = n->as_floating_point()) {
    const double v = f->get();
    if (std::isfinite(v) && v == std::round(v) && std::abs(v) < 1e9) return static_cast<int>(v);
  }
  throw InputError(loc(c, *n, join(path, key)), "expected an integer");
}

std::vector<double> number_list(const Ctx& c, const toml::node& n, const std::string& key) {
  const toml::array* a = n.as_array();
  if (!a) throw InputError(loc(c, n, key), "expected a list of numbers, e.g. [2, 1]");
  std::vector<double> out;
  int i = 0;
  for (const auto& e : *a) out.push_back(number_at(c, e, key + "[" + std::to_string(i++) + "]"));
  return out;
}

ScfOptions read_scf(const Ctx& c, const toml::table& t, ScfOptions o, double& threshold) {
  const std::string p = "scf";
  check_keys(c, t, p,
             {"max_iterations", "potential_tolerance", "energy_tolerance", "eigenvalue_tolerance", "mixing", "history",
              "density_threshold", "verbose"});
  o.max_iterations = get_int(c, t, p, "max_iterations", o.max_iterations);
  o.potential_tolerance = get_number(c, t, p, "potential_tolerance", o.potential_tolerance);
  o.energy_tolerance = get_number(c, t, p, "energy_tolerance", o.energy_tolerance);
  o.eigenvalue_tolerance = get_number(c, t, p, "eigenvalue_tolerance", o.eigenvalue_tolerance);
  o.mixing = get_number(c, t, p, "mixing", o.mixing);
  o.history = get_int(c, t, p, "history", o.history);
  o.verbose = detail::bool_key(c.file, t, p, "verbose", o.verbose);
  threshold = get_number(c, t, p, "density_threshold", threshold);
  if (o.max_iterations < 1) throw InputError(loc_in(c, t, p, "max_iterations"), "must be >= 1");
  for (const char* k : {"potential_tolerance", "energy_tolerance", "eigenvalue_tolerance"})
    if (!(get_number(c, t, p, k, 1.0) > 0)) throw InputError(loc_in(c, t, p, k), "must be positive (hartree)");
  if (!(o.mixing > 0 && o.mixing <= 1)) throw InputError(loc_in(c, t, p, "mixing"), "must be in (0, 1]");
  if (o.history < 1) throw InputError(loc_in(c, t, p, "history"), "must be >= 1 (1 = linear mixing)");
  if (!(threshold > 0 && threshold < 1e-6))
    throw InputError(loc_in(c, t, p, "density_threshold"), "must be in (0, 1e-6) (electrons per volume)");
  return o;
}

/// Resolved grid of one system, with enough of the input kept to place later errors.
struct GridInput {
  MeshSpec spec;
  std::string name;
  const toml::node* node = nullptr;    // the grid value (string or table), if given
  const toml::table* table = nullptr;  // the grid table, if given as a table
  /// Location of grid.key: the key's value, else the grid value, else the system table.
  SourceLocation where(const Ctx& c, const toml::table& system, const std::string& path, const std::string& key) const {
    if (table && table->get(key)) return loc(c, *table->get(key), path + ".grid." + key);
    if (node) return loc(c, *node, path + ".grid");
    return loc(c, system, path + ".grid");
  }
};

// Largest node count whose estimated memory stays under the limit, by bisection on the
// (monotonic) estimate.
double max_nodes(const MeshSpec& spec, Geometry g, GridUse use) {
  double lo = 1.0, hi = 1e12;
  for (int it = 0; it < 200; ++it) {
    const double mid = std::sqrt(lo * hi);
    MeshSpec probe = spec;
    if (g == Geometry::Line) {
      probe.element_size = 2.0 * spec.half_width * spec.degree / std::max(mid - 1.0, 1.0);
    } else {
      probe.elements = static_cast<int>(std::min(2e9, std::max(2.0, (mid - 1.0) / spec.degree)));
    }
    (grid_cost(probe, g, use).bytes <= kMaxGridBytes ? lo : hi) = mid;
  }
  return lo;
}

// Refuses a grid before anything is sized by it, with the estimate and the key to change.
void check_grid_size(const Ctx& c, const GridInput& gi, Geometry g, const std::string& sys_path) {
  const MeshSpec& s = gi.spec;
  const GridCost cost = grid_cost(s, g, c.use);
  if (cost.nodes < 2e9 && cost.bytes <= kMaxGridBytes) return;
  const bool line = g == Geometry::Line;
  const char* key = line ? (gi.table && gi.table->get("half_width") && !gi.table->get("element_size") ? "half_width" : "element_size")
                         : "elements";
  const SourceLocation where = gi.table && gi.table->get(key) ? loc(c, *gi.table->get(key), sys_path + ".grid." + key)
                               : gi.node                      ? loc(c, *gi.node, sys_path + ".grid")
                                                              : SourceLocation{c.file, 0, 0, sys_path + ".grid"};
  const double nmax = max_nodes(s, g, c.use);
  std::ostringstream m;
  m << "this grid is too large: " << std::setprecision(3) << cost.elements << " elements of degree " << s.degree << ", "
    << cost.nodes << " nodes, would need about " << format_bytes(cost.bytes) << " of memory (limit "
    << format_bytes(kMaxGridBytes) << ") and roughly " << format_seconds(cost.seconds) << "; ";
  if (line)
    m << "use element_size >= " << num(2.0 * s.half_width * s.degree / (nmax - 1.0)) << " bohr or a smaller half_width";
  else
    m << "use elements <= " << static_cast<long long>((nmax - 1.0) / s.degree) << " or a lower degree";
  if (c.use != GridUse::Banded) m << " (this command stores dense matrices of size nodes x nodes)";
  throw InputError(where, m.str());
}

MeshSpec preset_at(Geometry g, const std::string& name, const SourceLocation& where) {
  try {
    return grid_preset(g, name);
  } catch (const InputError& e) {
    const std::string near = nearest_word(name, grid_preset_names(g));
    throw InputError(where, std::string(e.what()) + (near.empty() ? "" : "; did you mean '" + near + "'?"));
  }
}

GridInput read_grid(const Ctx& c, const toml::table& system, Geometry g, const std::string& sys_path) {
  GridInput gi;
  const std::string path = sys_path + ".grid";
  gi.node = system.get("grid");
  if (!gi.node) {
    gi.name = "default";
    gi.spec = grid_preset(g, "default");
    return gi;
  }
  if (const auto* s = gi.node->as_string()) {
    gi.name = s->get();
    gi.spec = preset_at(g, gi.name, loc(c, *gi.node, path));
    return gi;
  }
  const toml::table* t = gi.node->as_table();
  if (!t) throw InputError(loc(c, *gi.node, path), "expected a preset name such as \"default\" or a table of grid settings");
  gi.table = t;
  const std::vector<std::string> radial{"preset", "degree", "elements", "first_element", "first_element_over_z", "r_max"};
  const std::vector<std::string> line{"preset", "degree", "element_size", "half_width"};
  const bool is_radial = g == Geometry::Radial;
  const std::vector<std::string> other =
      is_radial ? std::vector<std::string>{"element_size", "half_width"}
                : std::vector<std::string>{"elements", "first_element", "first_element_over_z", "r_max"};
  check_keys(c, *t, path, is_radial ? radial : line, other,
             is_radial ? "this grid setting belongs to line systems; atoms use degree, elements, first_element, "
                         "first_element_over_z, r_max"
                       : "this grid setting belongs to atoms; line systems use degree, element_size, half_width");
  gi.name = detail::string_key(c.file, *t, path, "preset", "default");
  gi.spec = preset_at(g, gi.name, loc_in(c, *t, path, "preset"));
  if (t->size() > (t->contains("preset") ? 1u : 0u)) gi.name += " (modified)";
  MeshSpec& s = gi.spec;
  s.degree = get_int(c, *t, path, "degree", s.degree);
  if (s.degree < 2 || s.degree > 32) throw InputError(loc_in(c, *t, path, "degree"), "degree must be between 2 and 32");
  if (is_radial) {
    s.elements = get_int(c, *t, path, "elements", s.elements);
    s.first_element = get_number(c, *t, path, "first_element", s.first_element);
    s.first_element_over_z = detail::bool_key(c.file, *t, path, "first_element_over_z", s.first_element_over_z);
    s.r_max = get_number(c, *t, path, "r_max", s.r_max);
    if (s.elements < 2) throw InputError(loc_in(c, *t, path, "elements"), "a radial grid needs at least 2 elements");
    if (!(s.first_element > 0)) throw InputError(loc_in(c, *t, path, "first_element"), "must be positive (bohr)");
    if (!(s.r_max > 0)) throw InputError(loc_in(c, *t, path, "r_max"), "must be positive (bohr)");
    if (s.r_max > kMaxRadius)
      throw InputError(loc_in(c, *t, path, "r_max"), "r_max = " + num(s.r_max) + " bohr is beyond the limit of " +
                                                         num(kMaxRadius) + " bohr; bound states of atoms decay well within it");
  } else {
    s.element_size = get_number(c, *t, path, "element_size", s.element_size);
    s.half_width = get_number(c, *t, path, "half_width", s.half_width);
    if (!(s.element_size > 0)) throw InputError(loc_in(c, *t, path, "element_size"), "must be positive (bohr)");
    if (!(s.half_width > 0)) throw InputError(loc_in(c, *t, path, "half_width"), "must be positive (bohr)");
    if (s.half_width > kMaxHalfWidth)
      throw InputError(loc_in(c, *t, path, "half_width"),
                       "half_width = " + num(s.half_width) + " bohr is beyond the limit of " + num(kMaxHalfWidth) + " bohr");
  }
  check_grid_size(c, gi, g, sys_path);
  return gi;
}

struct XcItem {
  std::string text;
  const toml::node* node;
  std::string key;
};

// Splits "lda_x + 0.5*gga_c_pbe" at the '+' signs that separate terms (not the '+' of an
// exponent such as 1e+0).
std::vector<std::string> split_terms(const std::string& s) {
  std::vector<std::string> out;
  std::string cur;
  for (std::size_t i = 0; i < s.size(); ++i) {
    const bool exponent = i >= 2 && (s[i - 1] == 'e' || s[i - 1] == 'E') && std::isdigit(static_cast<unsigned char>(s[i - 2])) &&
                          cur.find('*') == std::string::npos && cur.find_first_not_of("0123456789.eE \t") == std::string::npos;
    if (s[i] == '+' && !exponent) {
      out.push_back(cur);
      cur.clear();
    } else {
      cur += s[i];
    }
  }
  out.push_back(cur);
  for (auto& item : out) {
    const auto b = item.find_first_not_of(" \t"), e = item.find_last_not_of(" \t");
    item = b == std::string::npos ? std::string() : item.substr(b, e - b + 1);
  }
  return out;
}

std::vector<XcItem> read_xc(const Ctx& c, const toml::node* n, const std::string& path) {
  std::vector<XcItem> out;
  if (!n) return out;
  if (const auto* s = n->as_string()) {
    const auto terms = split_terms(s->get());
    for (const auto& item : terms) {
      if (item.empty())
        throw InputError(loc(c, *n, path), "empty term in '" + s->get() + "' (write e.g. \"lda_x + lda_c_vwn\")");
      out.push_back({item, n, path});
    }
    return out;
  }
  if (const auto* i = n->as_integer()) {
    out.push_back({std::to_string(i->get()), n, path});
    return out;
  }
  if (const toml::array* a = n->as_array()) {
    int k = 0;
    for (const auto& e : *a) {
      const std::string ek = path + "[" + std::to_string(k++) + "]";
      if (const auto* s = e.as_string())
        out.push_back({s->get(), &e, ek});
      else if (const auto* i = e.as_integer())
        out.push_back({std::to_string(i->get()), &e, ek});
      else
        throw InputError(loc(c, e, ek), "expected a libxc functional name such as \"lda_x\" or a libxc number");
    }
    return out;
  }
  throw InputError(loc(c, *n, path), "expected a functional name, a list of names, or a libxc number");
}

bool is_none(const std::string& s) {
  std::string l = s;
  std::transform(l.begin(), l.end(), l.begin(), [](unsigned char ch) { return std::tolower(ch); });
  return l == "none";
}

// Builds every term once, so unknown names, unsupported families and 1D functionals on atoms
// are reported at the line where they are written.
void validate_xc(const Ctx& c, const std::vector<XcItem>& items, const XcSettings& settings) {
  for (const XcItem& it : items) {
    if (is_none(it.text)) continue;
    if (const auto star = it.text.find('*'); star != std::string::npos) {
      const std::string w = it.text.substr(0, star);
      std::size_t used = 0;
      double v = 0.0;
      try {
        v = std::stod(w, &used);
      } catch (const std::exception&) {
        used = 0;
      }
      const auto rest = w.find_first_not_of(" \t", used);
      if (used == 0 || rest != std::string::npos || !std::isfinite(v))
        throw InputError(loc(c, *it.node, it.key),
                         "cannot read the weight '" + w + "' in '" + it.text + "' (write e.g. \"0.5*gga_x_pbe\")");
    }
    try {
      (void)make_functional({it.text}, settings);
    } catch (const InputError& e) {
      rethrow_at(loc(c, *it.node, it.key), e);
    }
  }
}

void check_name(const Ctx& c, const toml::table& t, const std::string& path, const std::string& name) {
  const bool ok = !name.empty() && name.size() <= 100 && name[0] != '.' &&
                  std::all_of(name.begin(), name.end(), [](unsigned char ch) {
                    return std::isalnum(ch) || ch == '_' || ch == '-' || ch == '+' || ch == '.';
                  });
  if (!ok)
    throw InputError(loc_in(c, t, path, "name"),
                     "system names become file names: use letters, digits, '_', '-', '+' and '.' (not first), "
                     "at most 100 characters");
}

const std::vector<std::string> kCommonKeys{"name", "kind", "xc", "xc_weights", "xc_parameters", "charge", "spin", "grid"};
const std::vector<std::string> kAtomKeys{"element", "Z", "configuration"};
const std::vector<std::string> kLineKeys{"nucleus", "potential", "electron_softening", "interacting",
                                         "nucleus_softening", "n_up", "n_down", "occupations", "unoccupied_levels"};

void read_atom(const Ctx& c, const toml::table& t, const std::string& path, SystemSpec& s, const GridInput& grid) {
  const toml::node* el = t.get("element");
  const toml::node* z = t.get("Z");
  if (el && z) throw InputError(loc(c, *z, path + ".Z"), "give either element or Z, not both");
  if (el) {
    const auto* sym = el->as_string();
    if (!sym) throw InputError(loc(c, *el, path + ".element"), "expected an element symbol such as \"Ne\"");
    s.atom.Z = atomic_number(sym->get(), loc(c, *el, path + ".element"));
  } else if (z) {
    s.atom.Z = get_int(c, t, path, "Z", 1);
    if (s.atom.Z < 1 || s.atom.Z > 118) throw InputError(loc(c, *z, path + ".Z"), "Z must be between 1 and 118");
  } else {
    throw InputError(loc(c, t, path + ".element"), "an atom needs element = \"Symbol\" or Z = number");
  }
  const int Z = s.atom.Z;
  const std::string who = element_symbol(Z) + " (Z = " + std::to_string(Z) + ")";
  const SourceLocation charge_at = loc_in(c, t, path, "charge");
  if (!(s.charge < Z))
    throw InputError(charge_at, "charge " + num(s.charge) + " leaves Z - charge = " + num(Z - s.charge) +
                                    " electrons on " + who + "; the charge must be smaller than Z");
  if (const toml::node* cf = t.get("configuration")) {
    const auto* text = cf->as_string();
    if (!text) throw InputError(loc(c, *cf, path + ".configuration"), "expected a string such as \"[Ne] 3s2 3p1\"");
    SourceLocation where = loc(c, *cf, path + ".configuration");
    if (where.column > 0) where.column += 1;  // first character after the opening quote
    s.atom.configuration = parse_configuration(text->get(), where);
    const double ne = electron_count(s.atom.configuration);
    if (std::abs(ne - (Z - s.charge)) > 1e-9) {
      std::ostringstream m;
      m << "the configuration holds " << num(ne) << " electrons but " << who << " with charge " << num(s.charge)
        << " has Z - charge = " << num(Z - s.charge);
      throw InputError(loc(c, *cf, path + ".configuration"), m.str());
    }
  } else {
    if (std::abs(s.charge - std::round(s.charge)) > 1e-12)
      throw InputError(charge_at, "a fractional charge needs an explicit configuration (e.g. \"[He] 2s2 2p1.5\")");
    try {
      s.atom.configuration =
          parse_configuration(default_configuration(Z, static_cast<int>(std::lround(s.charge)), charge_at));
    } catch (const InputError& e) {
      rethrow_at(charge_at, e);
    }
  }
  // Resolution near the nucleus: the first element must resolve the 1s orbital (size ~1/Z).
  const MeshSpec& g = grid.spec;
  const double h0 = g.first_element / (g.first_element_over_z ? Z : 1.0);
  if (h0 > 2.0 / Z)
    throw InputError(grid.where(c, t, path, "first_element"),
                     "the radial grid is too coarse for " + who + ": its first element is " + num(h0) +
                         " bohr, at most 2/Z = " + num(2.0 / Z) + " bohr is needed; use a preset or first_element <= " +
                         num(g.first_element_over_z ? 2.0 : 2.0 / Z) +
                         (g.first_element_over_z ? " (it is divided by Z)" : " bohr"));
  if (!(g.r_max > h0 * g.elements * 0.5))
    throw InputError(grid.where(c, t, path, "r_max"),
                     "r_max = " + num(g.r_max) + " bohr is too small for " + std::to_string(g.elements) +
                         " elements starting at " + num(h0) + " bohr; raise r_max or lower elements");
}

// A length the potential defines, which the node spacing must resolve.
struct LengthScale {
  double length;     // bohr
  double per_node;   // the node spacing may be at most per_node * length
  SourceLocation at;  // the key that defines it
  std::string what;
};

// Largest node spacing, per harmonic length, at which the lowest level omega/2 of a harmonic
// well is still exact to 1e-7 relative (measured: at most 5e-8 at these limits for every
// degree, tests/guards_test.cpp). Low degrees converge more slowly, so they need more nodes.
double resolve_per_node(int degree) {
  switch (degree) {
    case 2:
      return 0.035;
    case 3:
      return 0.1;
    case 4:
      return 0.175;
    case 5:
      return 0.2;
    default:
      return 0.25;
  }
}

void read_line(const Ctx& c, const toml::table& t, const std::string& path, SystemSpec& s, const GridInput& grid) {
  LineSystem& ls = s.line;
  ls.electron_softening = get_number(c, t, path, "electron_softening", ls.electron_softening);
  ls.interacting = detail::bool_key(c.file, t, path, "interacting", ls.interacting);
  if (t.contains("nucleus_softening")) {
    ls.nucleus_softening = get_number(c, t, path, "nucleus_softening", 0.0);
    if (ls.nucleus_softening < 0) throw InputError(loc_in(c, t, path, "nucleus_softening"), "must be >= 0 (bohr)");
  }
  if (!(ls.electron_softening > 0))
    throw InputError(loc_in(c, t, path, "electron_softening"), "must be positive (bohr)");
  const double L = grid.spec.half_width;
  double min_soft = ls.interacting ? ls.electron_softening : std::numeric_limits<double>::infinity();
  SourceLocation min_soft_at = loc_in(c, t, path, "electron_softening");
  if (const toml::node* nn = t.get("nucleus")) {
    const toml::array* arr = nn->as_array();
    if (!arr) throw InputError(loc(c, *nn, path + ".nucleus"), "expected [[system.nucleus]] tables");
    int i = 0;
    for (const auto& e : *arr) {
      const toml::table* nt = e.as_table();
      const std::string np = path + ".nucleus[" + std::to_string(i++) + "]";
      if (!nt) throw InputError(loc(c, e, np), "expected a table with charge, position, softening");
      check_keys(c, *nt, np, {"charge", "position", "softening"});
      Nucleus1d nuc;
      nuc.charge = get_number(c, *nt, np, "charge", nuc.charge);
      nuc.position = get_number(c, *nt, np, "position", nuc.position);
      nuc.softening = get_number(c, *nt, np, "softening", nuc.softening);
      if (!(nuc.softening > 0)) throw InputError(loc_in(c, *nt, np, "softening"), "must be positive (bohr)");
      if (std::abs(nuc.position) > L - kBoxMargin)
        throw InputError(nt->get("position") ? loc_in(c, *nt, np, "position") : grid.where(c, t, path, "half_width"),
                         "a nucleus at x = " + num(nuc.position) + " bohr lies outside or too near the edge of the box [" +
                             num(-L) + ", " + num(L) + "] bohr (nuclei must be at least " + num(kBoxMargin) +
                             " bohr inside); raise grid.half_width or move the nucleus");
      if (nuc.softening < min_soft) {
        min_soft = nuc.softening;
        min_soft_at = loc_in(c, *nt, np, "softening");
      }
      ls.nuclei.push_back(nuc);
    }
  }
  {
    // Before any list of occupations is built: every state needs its own grid unknown.
    const double ne = s.electron_count();
    const double states = std::ceil(ne / (s.spin_polarized ? 1.0 : 2.0) - 1e-9);
    const double unknowns = grid_cost(grid.spec, Geometry::Line, GridUse::Banded).nodes - 2.0;
    if (ne > 0 && states >= unknowns) {
      std::size_t big = 0;
      for (std::size_t k = 1; k < ls.nuclei.size(); ++k)
        if (ls.nuclei[k].charge > ls.nuclei[big].charge) big = k;
      const bool by_charge = ls.nuclei.empty() || (t.contains("charge") && -s.charge > ls.nuclei[big].charge);
      const SourceLocation at =
          by_charge ? loc_in(c, t, path, "charge")
                    : loc_in(c, *t.get("nucleus")->as_array()->get(big)->as_table(), path + ".nucleus[" + std::to_string(big) + "]",
                             "charge");
      throw InputError(at, "the system would have " + num(ne) + " electrons in " + num(states) +
                               " occupied states per spin channel, but the grid has only " + num(unknowns) +
                               " unknowns; lower the " + (by_charge ? "electron count" : "nuclear charge") +
                               " or use a larger grid");
    }
  }
  std::vector<LengthScale> scales;
  for (std::size_t k = 0; k < ls.nuclei.size(); ++k) {
    // Near its minimum a soft-Coulomb well -q/sqrt(x^2 + a^2) is harmonic with
    // omega^2 = q/a^3, so its ground state has the width (a^3/q)^(1/4).
    const Nucleus1d& nuc = ls.nuclei[k];
    if (nuc.charge > 0) {
      const std::string np = path + ".nucleus[" + std::to_string(k) + "]";
      const toml::table& nt = *t.get("nucleus")->as_array()->get(k)->as_table();
      const double len = std::pow(nuc.softening * nuc.softening * nuc.softening / nuc.charge, 0.25);
      scales.push_back({len, 0.5, loc_in(c, nt, np, "charge"),
                        "the width (softening^3/charge)^(1/4) = " + num(len) + " bohr of the well of nucleus " +
                            std::to_string(k)});
    }
  }
  if (const toml::node* pn = t.get("potential")) {
    const toml::array* arr = pn->as_array();
    if (!arr) throw InputError(loc(c, *pn, path + ".potential"), "expected [[system.potential]] tables");
    int i = 0;
    for (const auto& e : *arr) {
      const toml::table* pt = e.as_table();
      const std::string pp = path + ".potential[" + std::to_string(i++) + "]";
      if (!pt) throw InputError(loc(c, e, pp), "expected a table");
      const std::string k = detail::string_key(c.file, *pt, pp, "kind", "");
      const std::vector<std::string> kinds{"harmonic", "gaussian", "table"};
      ExternalTerm term;
      if (k == "harmonic") {
        check_keys(c, *pt, pp, {"kind", "omega", "center"});
        term.kind = ExternalTerm::Kind::Harmonic;
        term.omega = get_number(c, *pt, pp, "omega", term.omega);
        term.center = get_number(c, *pt, pp, "center", 0.0);
        if (term.omega != 0) {
          const double len = 1.0 / std::sqrt(std::abs(term.omega));
          scales.push_back({len, resolve_per_node(grid.spec.degree), loc_in(c, *pt, pp, "omega"),
                            "the harmonic length 1/sqrt(omega) = " + num(len) + " bohr"});
        }
      } else if (k == "gaussian") {
        check_keys(c, *pt, pp, {"kind", "depth", "center", "width"});
        term.kind = ExternalTerm::Kind::Gaussian;
        term.depth = get_number(c, *pt, pp, "depth", term.depth);
        term.center = get_number(c, *pt, pp, "center", 0.0);
        term.width = get_number(c, *pt, pp, "width", term.width);
        if (!(term.width > 0)) throw InputError(loc_in(c, *pt, pp, "width"), "must be positive (bohr)");
        scales.push_back({term.width, resolve_per_node(grid.spec.degree), loc_in(c, *pt, pp, "width"),
                          "the Gaussian width = " + num(term.width) + " bohr"});
        if (term.depth > 0) {
          // A deep well is harmonic at its bottom with omega^2 = depth/width^2.
          const double len = std::sqrt(term.width) / std::pow(term.depth, 0.25);
          scales.push_back({len, resolve_per_node(grid.spec.degree), loc_in(c, *pt, pp, "depth"),
                            "the width sqrt(width)/depth^(1/4) = " + num(len) + " bohr of the Gaussian well"});
        }
      } else if (k == "table") {
        check_keys(c, *pt, pp, {"kind", "file"});
        const std::string f = detail::string_key(c.file, *pt, pp, "file", "");
        if (f.empty()) throw InputError(loc_in(c, *pt, pp, "file"), "a table potential needs file = \"path.csv\"");
        fs::path fp(f);
        if (fp.is_relative()) fp = c.dir / fp;
        try {
          term = read_potential_table(fp.string());
        } catch (const InputError& err) {
          rethrow_at(loc_in(c, *pt, pp, "file"), err, "in the potential table: ");
        }
        // The spline follows the table between its points; the grid must follow the spline.
        double dmin = std::numeric_limits<double>::infinity();
        for (std::size_t j = 0; j + 1 < term.table_x.size(); ++j)
          if (term.table_x[j + 1] > -L && term.table_x[j] < L) dmin = std::min(dmin, term.table_x[j + 1] - term.table_x[j]);
        if (std::isfinite(dmin))
          scales.push_back({dmin, 1.0, loc_in(c, *pt, pp, "file"),
                            "the smallest point spacing " + num(dmin) + " bohr of the potential table"});
      } else {
        const std::string near = k.empty() ? std::string() : nearest_word(k, kinds);
        throw InputError(loc_in(c, *pt, pp, "kind"),
                         (k.empty() ? std::string("missing kind") : "unknown potential kind '" + k + "'") +
                             (near.empty() ? "" : "; did you mean '" + near + "'?") +
                             " (valid: \"harmonic\", \"gaussian\", \"table\")");
      }
      ls.potentials.push_back(term);
    }
  }
  if (ls.nuclei.empty() && ls.potentials.empty())
    throw InputError(loc(c, t, path + ".nucleus"), "a line system needs at least one [[system.nucleus]] or [[system.potential]]");
  // Resolution: nodes must be closer than half the shortest softening length, and close
  // enough for every other length the potential defines. The real element size 2L/E is
  // used, which is what the mesh will have.
  const MeshSpec& g = grid.spec;
  const double spacing = grid_cost(g, Geometry::Line, GridUse::Banded).element_size / g.degree;
  if (spacing > 0.5 * min_soft)
    throw InputError(grid.where(c, t, path, "element_size"),
                     "the 1D grid is too coarse: node spacing element_size/degree = " + num(spacing) +
                         " bohr exceeds half the smallest softening length (" + min_soft_at.key + " = " + num(min_soft) +
                         " bohr); use element_size <= " + num(0.5 * min_soft * g.degree) +
                         " or a higher degree");
  // After the softening check, so that its message stays what it was for such inputs.
  for (const LengthScale& ls_ : scales)
    if (spacing > ls_.per_node * ls_.length * (1.0 + 1e-9))  // rounding of sizes given at the limit
      throw InputError(grid.where(c, t, path, "element_size"),
                       "the 1D grid is too coarse for " + ls_.what + " (" + ls_.at.key + " at line " +
                           std::to_string(ls_.at.line) + "): node spacing element_size/degree = " + num(spacing) +
                           " bohr exceeds " + num(ls_.per_node) + " times that length; use element_size <= " +
                           num(ls_.per_node * ls_.length * g.degree) + " bohr or a higher degree");
  // Electron count and spin split.
  const double ne = s.electron_count();
  const SourceLocation charge_at = loc_in(c, t, path, "charge");
  if (!(ne > 0)) {
    double q = 0.0;
    for (const auto& nuc : ls.nuclei) q += nuc.charge;
    throw InputError(charge_at, "the system would have " + num(ne) + " electrons (nuclear charge " + num(q) +
                                    " minus charge " + num(s.charge) + "); it needs more than zero" +
                                    (ls.nuclei.empty() ? "; for N electrons in an external potential set charge = -N" : ""));
  }
  if (t.contains("n_up")) s.n_up = get_number(c, t, path, "n_up", 0.0);
  if (t.contains("n_down")) s.n_down = get_number(c, t, path, "n_down", 0.0);
  if ((s.n_up || s.n_down) && !s.spin_polarized)
    throw InputError(loc_in(c, t, path, t.contains("n_up") ? "n_up" : "n_down"), "n_up / n_down need spin = \"polarized\"");
  for (const char* k : {"n_up", "n_down"}) {
    const auto& v = std::string(k) == "n_up" ? s.n_up : s.n_down;
    if (v && (*v < 0 || *v > ne + 1e-12))
      throw InputError(loc_in(c, t, path, k), "must be between 0 and the electron count " + num(ne));
  }
  if (s.n_up && s.n_down && std::abs(*s.n_up + *s.n_down - ne) > 1e-9)
    throw InputError(loc_in(c, t, path, "n_down"), "n_up + n_down = " + num(*s.n_up + *s.n_down) +
                                                       " but the system has " + num(ne) + " electrons");
  s.unoccupied_levels = get_int(c, t, path, "unoccupied_levels", s.unoccupied_levels);
  if (s.unoccupied_levels < 0) throw InputError(loc_in(c, t, path, "unoccupied_levels"), "must be >= 0");
  if (const toml::node* on = t.get("occupations")) {
    const std::string op = path + ".occupations";
    if (s.n_up || s.n_down) throw InputError(loc(c, *on, op), "give either occupations or n_up / n_down, not both");
    const double capacity = s.spin_polarized ? 1.0 : 2.0;
    if (const toml::table* ot = on->as_table()) {
      check_keys(c, *ot, op, {"up", "down"});
      if (!s.spin_polarized)
        throw InputError(loc(c, *on, op), "up/down occupations need spin = \"polarized\"; unpolarized: occupations = [2, 1]");
      s.occupations.assign(2, {});
      if (ot->get("up")) s.occupations[0] = number_list(c, *ot->get("up"), op + ".up");
      if (ot->get("down")) s.occupations[1] = number_list(c, *ot->get("down"), op + ".down");
    } else {
      if (s.spin_polarized)
        throw InputError(loc(c, *on, op), "spin-polarized occupations are given as {up = [...], down = [...]}");
      s.occupations = {number_list(c, *on, op)};
    }
    double total = 0.0;
    for (const auto& ch : s.occupations)
      for (double f : ch) {
        if (f < 0.0 || f > capacity + 1e-12)
          throw InputError(loc(c, *on, op), "occupation " + num(f) + " outside [0, " + num(capacity) + "] (" +
                                                (s.spin_polarized ? "one electron per state and spin" : "two electrons per state") + ")");
        total += f;
      }
    if (std::abs(total - ne) > 1e-9)
      throw InputError(loc(c, *on, op), "occupations sum to " + num(total) + " but the system has " + num(ne) + " electrons");
  }
}

// Per-term parameters: xc_parameters = { "model:pbe_x" = { kappa = 0.9 }, "formula:c" = [0.1, 2] }.
void read_xc_parameters(const Ctx& c, const toml::table& t, const std::string& path, SystemSpec& s, const XcSettings& xs) {
  const toml::node* n = t.get("xc_parameters");
  if (!n) return;
  const toml::table* pt = n->as_table();
  if (!pt) throw InputError(loc(c, *n, path + ".xc_parameters"), "expected a table { \"model:<family>\" = { name = value } }");
  s.xc_parameters.assign(s.xc.size(), {});
  for (const auto& [k, v] : *pt) {
    const std::string key(k.str());
    const std::string kp = path + ".xc_parameters." + key;
    const auto it = std::find(s.xc.begin(), s.xc.end(), key);
    if (it == s.xc.end()) {
      const std::string near = nearest_word(key, s.xc);
      throw InputError(loc(c, v, kp), "'" + key + "' is not in this system's xc list" +
                                          (near.empty() ? std::string() : "; did you mean '" + near + "'?"));
    }
    const std::size_t term = static_cast<std::size_t>(it - s.xc.begin());
    XcFunctional f;
    try {
      f = make_functional({key}, xs);
    } catch (const InputError& e) {
      rethrow_at(loc(c, v, kp), e);
    }
    const auto names = f.term(0).parameter_names();
    std::vector<double> values = f.term(0).parameters();
    if (names.empty()) throw InputError(loc(c, v, kp), "'" + key + "' has no trainable parameters (only model:, formula: and callback: terms do)");
    if (const toml::array* a = v.as_array()) {
      values = number_list(c, v, kp);
      if (values.size() != names.size() && names.back() != "c" + std::to_string(names.size() - 1))
        throw InputError(loc(c, v, kp), "expected " + std::to_string(names.size()) + " values");
      (void)a;
    } else if (const toml::table* vt = v.as_table()) {
      for (const auto& [pk, pv] : *vt) {
        const std::string pname(pk.str());
        const auto pi = std::find(names.begin(), names.end(), pname);
        if (pi == names.end()) {
          const std::string near = nearest_word(pname, names);
          throw InputError(loc(c, pv, kp + "." + pname), "unknown parameter" + (near.empty() ? std::string() : "; did you mean '" + near + "'?"));
        }
        values[static_cast<std::size_t>(pi - names.begin())] = detail::finite_number(c.file, pv, kp + "." + pname);
      }
    } else {
      throw InputError(loc(c, v, kp), "expected a table of name = value or a list of numbers");
    }
    s.xc_parameters[term] = values;
  }
}

SystemSpec read_system(const Ctx& c, const toml::table& t, int index, double threshold,
                       const std::vector<FormulaSpec>& formulas) {
  const std::string path = "system[" + std::to_string(index) + "]";
  SystemSpec s;
  const std::string kind = detail::string_key(c.file, t, path, "kind", "");
  detail::refuse_renamed_key(c.file, t, path, "extra_states", "unoccupied_levels");
  if (kind == "atom") {
    s.geometry = Geometry::Radial;
    check_keys(c, t, path, detail::concat(kCommonKeys, kAtomKeys), kLineKeys,
               "this key belongs to line systems (kind = \"line\"); this system has kind = \"atom\"");
  } else if (kind == "line") {
    s.geometry = Geometry::Line;
    check_keys(c, t, path, detail::concat(kCommonKeys, kLineKeys), kAtomKeys,
               "this key belongs to atoms (kind = \"atom\"); this system has kind = \"line\"");
  } else {
    // Misspelt keys first: a misspelt "kind" would otherwise be reported as missing.
    check_keys(c, t, path, detail::concat(detail::concat(kCommonKeys, kAtomKeys), kLineKeys));
    const std::string near = kind.empty() ? std::string() : nearest_word(kind, {"atom", "line"});
    throw InputError(loc_in(c, t, path, "kind"),
                     (kind.empty() ? std::string("missing kind") : "unknown kind '" + kind + "'") +
                         (near.empty() ? "" : "; did you mean '" + near + "'?") +
                         ": use kind = \"atom\" (spherical atom or ion) or kind = \"line\" (1D model system)");
  }
  s.name = detail::string_key(c.file, t, path, "name", "system" + std::to_string(index + 1));
  check_name(c, t, path, s.name);
  s.charge = get_number(c, t, path, "charge", 0.0);
  const std::string spin = detail::string_key(c.file, t, path, "spin", "unpolarized");
  if (spin == "polarized")
    s.spin_polarized = true;
  else if (spin != "unpolarized")
    throw InputError(loc_in(c, t, path, "spin"), "spin must be \"unpolarized\" or \"polarized\"");
  const std::vector<XcItem> xc = read_xc(c, t.get("xc"), path + ".xc");
  for (const auto& it : xc) s.xc.push_back(it.text);
  const GridInput grid = read_grid(c, t, s.geometry, path);
  s.grid = grid.spec;
  s.grid_name = grid.name;
  if (s.geometry == Geometry::Radial)
    read_atom(c, t, path, s, grid);
  else
    read_line(c, t, path, s, grid);
  const bool has_xc = std::any_of(xc.begin(), xc.end(), [](const XcItem& it) { return !is_none(it.text); });
  if (s.geometry == Geometry::Line && !s.line.interacting && has_xc)
    throw InputError(loc_in(c, t, path, "xc"), "a non-interacting system (interacting = false) cannot have xc");
  XcSettings xs;
  xs.one_dimensional = s.geometry == Geometry::Line;
  xs.softening = s.line.electron_softening;
  xs.density_threshold = threshold;
  s.density_threshold = threshold;
  s.formulas = formulas;
  for (const FormulaSpec& f : formulas) xs.formulas.push_back(compile_formula(f));
  validate_xc(c, xc, xs);
  if (const toml::node* wn = t.get("xc_weights")) {
    s.xc_weights = number_list(c, *wn, path + ".xc_weights");
    if (s.xc_weights.size() != s.xc.size())
      throw InputError(loc(c, *wn, path + ".xc_weights"), "give one weight per xc term (" + std::to_string(s.xc.size()) + ")");
  }
  read_xc_parameters(c, t, path, s, xs);
  return s;
}

std::vector<FormulaSpec> read_formulas(const Ctx& c, const toml::table& root) {
  std::vector<FormulaSpec> out;
  const toml::node* fn = root.get("formula");
  if (!fn) return out;
  const toml::table* ft = fn->as_table();
  if (!ft) throw InputError(loc(c, *fn, "formula"), "expected [formula.<name>] tables");
  for (const auto& [k, v] : *ft) {
    const std::string name(k.str());
    const std::string path = "formula." + name;
    const toml::table* t = v.as_table();
    if (!t) throw InputError(loc(c, v, path), "expected a table with expression, per and parameters");
    check_keys(c, *t, path, {"expression", "per", "parameters"});
    FormulaSpec f;
    f.name = name;
    const toml::node* en = t->get("expression");
    if (!en || !en->as_string()) throw InputError(loc_in(c, *t, path, "expression"), "a formula needs expression = \"...\"");
    f.expression = en->as_string()->get();
    f.where = loc(c, *en, path + ".expression");
    f.where.column = 0;  // the message gives the column inside the expression
    const std::string per = detail::string_key(c.file, *t, path, "per", "particle");
    if (per == "volume")
      f.per_volume = true;
    else if (per != "particle")
      throw InputError(loc_in(c, *t, path, "per"), "per must be \"particle\" (energy per electron) or \"volume\"");
    if (const toml::node* pn = t->get("parameters")) {
      const toml::table* pt = pn->as_table();
      if (!pt) throw InputError(loc(c, *pn, path + ".parameters"), "expected { name = value, ... }");
      for (const auto& [pk, pv] : *pt) {
        const double val = detail::finite_number(c.file, pv, path + ".parameters." + std::string(pk.str()));
        f.parameter_names.emplace_back(pk.str());
        f.parameter_values.push_back(val);
      }
    }
    compile_formula(f);  // syntax errors now, with line and column
    out.push_back(std::move(f));
  }
  return out;
}

SolveInput parse_table(const toml::table& root, const Ctx& c, const std::vector<std::string>& extra = {}) {
  std::vector<std::string> top{"system", "scf", "formula"};
  top.insert(top.end(), extra.begin(), extra.end());
  check_keys(c, root, "", top);
  SolveInput in;
  const std::vector<FormulaSpec> formulas = read_formulas(c, root);
  in.file = c.file;
  if (const toml::node* sn = root.get("scf")) {
    const toml::table* st = sn->as_table();
    if (!st) throw InputError(loc(c, *sn, "scf"), "expected a [scf] table");
    in.scf = read_scf(c, *st, in.scf, in.density_threshold);
  }
  const toml::node* sys = root.get("system");
  if (!sys) throw InputError(SourceLocation{c.file, 1, 0, "system"}, "no [[system]] given: nothing to solve");
  const toml::array* arr = sys->as_array();
  if (!arr) throw InputError(loc(c, *sys, "system"), "write [[system]] (double brackets) for each system");
  if (arr->empty()) throw InputError(loc(c, *sys, "system"), "no [[system]] given: nothing to solve");
  int i = 0;
  std::map<std::string, int> names;
  for (const auto& e : *arr) {
    const std::string path = "system[" + std::to_string(i) + "]";
    const toml::table* t = e.as_table();
    if (!t) throw InputError(loc(c, e, path), "expected a table");
    SystemSpec s = read_system(c, *t, i, in.density_threshold, formulas);
    if (const auto [it, fresh] = names.emplace(s.name, loc(c, *t, path).line); !fresh)
      throw InputError(loc_in(c, *t, path, "name"), "duplicate system name '" + s.name + "' (first used by the system at line " +
                                                        std::to_string(it->second) + "); names become output file names");
    in.systems.push_back(std::move(s));
    in.system_locations.push_back(loc(c, *t, path));
    ++i;
  }
  return in;
}

SolveInput parse_with(const std::string& text, const std::string& name) {
  Ctx c{name, fs::path(name).parent_path()};
  return parse_table(detail::parse_toml(text, name), c);
}

}  // namespace

SolveInput parse_solve_input(const std::string& text, const std::string& name) { return parse_with(text, name); }

namespace detail {
SolveInput parse_solve_root(const toml::table& root, const std::string& file, const std::vector<std::string>& extra_keys,
                            GridUse use) {
  Ctx c{file, fs::path(file).parent_path(), use};
  return parse_table(root, c, extra_keys);
}
}  // namespace detail

SolveInput read_solve_input(const std::string& path) {
  return parse_with(detail::read_text_file(path, "cannot open input file"), path);
}

}  // namespace stillpoint
