#include "stillpoint/input.hpp"

#include <toml++/toml.h>

#include <filesystem>
#include <fstream>
#include <set>
#include <sstream>

#include "stillpoint/errors.hpp"
#include "stillpoint/grid_presets.hpp"

namespace stillpoint {

namespace {

namespace fs = std::filesystem;

struct Ctx {
  std::string file;
  fs::path dir;
};

SourceLocation loc(const Ctx& c, const toml::node& n, const std::string& key) {
  const auto& s = n.source();
  return SourceLocation{c.file, static_cast<int>(s.begin.line), static_cast<int>(s.begin.column), key};
}

void check_keys(const Ctx& c, const toml::table& t, const std::string& path, const std::vector<std::string>& allowed) {
  for (const auto& [k, v] : t) {
    const std::string key(k.str());
    if (std::find(allowed.begin(), allowed.end(), key) != allowed.end()) continue;
    const std::string near = nearest_word(key, allowed);
    throw InputError(loc(c, v, path.empty() ? key : path + "." + key),
                     "unknown key" + (near.empty() ? std::string() : "; did you mean '" + near + "'?"));
  }
}

double get_number(const Ctx& c, const toml::table& t, const std::string& path, const std::string& key, double def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  if (auto v = n->value<double>()) {
    if (!std::isfinite(*v)) throw InputError(loc(c, *n, path + key), "must be a finite number");
    return *v;
  }
  throw InputError(loc(c, *n, path + key), "expected a number");
}

int get_int(const Ctx& c, const toml::table& t, const std::string& path, const std::string& key, int def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  if (auto v = n->value<int64_t>()) return static_cast<int>(*v);
  throw InputError(loc(c, *n, path + key), "expected an integer");
}

bool get_bool(const Ctx& c, const toml::table& t, const std::string& path, const std::string& key, bool def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  if (auto v = n->value<bool>()) return *v;
  throw InputError(loc(c, *n, path + key), "expected true or false");
}

std::string get_string(const Ctx& c, const toml::table& t, const std::string& path, const std::string& key,
                       const std::string& def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  if (auto v = n->value<std::string>()) return *v;
  throw InputError(loc(c, *n, path + key), "expected a string");
}

std::vector<double> number_list(const Ctx& c, const toml::node& n, const std::string& key) {
  const toml::array* a = n.as_array();
  if (!a) throw InputError(loc(c, n, key), "expected a list of numbers");
  std::vector<double> out;
  for (const auto& e : *a) {
    auto v = e.value<double>();
    if (!v) throw InputError(loc(c, e, key), "expected a number");
    out.push_back(*v);
  }
  return out;
}

ScfOptions read_scf(const Ctx& c, const toml::table& t, ScfOptions o, double& threshold) {
  check_keys(c, t, "scf",
             {"max_iterations", "potential_tolerance", "energy_tolerance", "eigenvalue_tolerance", "mixing", "history",
              "density_threshold", "verbose"});
  o.max_iterations = get_int(c, t, "scf.", "max_iterations", o.max_iterations);
  o.potential_tolerance = get_number(c, t, "scf.", "potential_tolerance", o.potential_tolerance);
  o.energy_tolerance = get_number(c, t, "scf.", "energy_tolerance", o.energy_tolerance);
  o.eigenvalue_tolerance = get_number(c, t, "scf.", "eigenvalue_tolerance", o.eigenvalue_tolerance);
  o.mixing = get_number(c, t, "scf.", "mixing", o.mixing);
  o.history = get_int(c, t, "scf.", "history", o.history);
  o.verbose = get_bool(c, t, "scf.", "verbose", o.verbose);
  threshold = get_number(c, t, "scf.", "density_threshold", threshold);
  if (o.max_iterations < 1) throw InputError(loc(c, *t.get("max_iterations"), "scf.max_iterations"), "must be >= 1");
  if (!(o.mixing > 0 && o.mixing <= 1))
    throw InputError(loc(c, *t.get("mixing"), "scf.mixing"), "must be in (0, 1]");
  if (!(threshold > 0 && threshold < 1e-6)) throw InputError(SourceLocation{c.file, 0, 0, "scf.density_threshold"}, "must be in (0, 1e-6)");
  return o;
}

MeshSpec read_grid(const Ctx& c, const toml::node* n, Geometry g, const std::string& path, std::string& name) {
  if (!n) {
    name = "default";
    return grid_preset(g, "default");
  }
  if (auto s = n->value<std::string>()) {
    name = *s;
    try {
      return grid_preset(g, *s);
    } catch (const InputError& e) {
      throw InputError(loc(c, *n, path), e.what());
    }
  }
  const toml::table* t = n->as_table();
  if (!t) throw InputError(loc(c, *n, path), "expected a preset name or a table");
  const std::vector<std::string> keys = g == Geometry::Radial
                                            ? std::vector<std::string>{"preset", "degree", "elements", "first_element", "r_max"}
                                            : std::vector<std::string>{"preset", "degree", "element_size", "half_width"};
  check_keys(c, *t, path, keys);
  name = get_string(c, *t, path + ".", "preset", "default");
  MeshSpec s;
  try {
    s = grid_preset(g, name);
  } catch (const InputError& e) {
    throw InputError(loc(c, *t->get("preset"), path + ".preset"), e.what());
  }
  if (t->size() > (t->contains("preset") ? 1u : 0u)) name += " (modified)";
  s.degree = get_int(c, *t, path + ".", "degree", s.degree);
  if (g == Geometry::Radial) {
    s.elements = get_int(c, *t, path + ".", "elements", s.elements);
    s.first_element = get_number(c, *t, path + ".", "first_element", s.first_element);
    s.r_max = get_number(c, *t, path + ".", "r_max", s.r_max);
  } else {
    s.element_size = get_number(c, *t, path + ".", "element_size", s.element_size);
    s.half_width = get_number(c, *t, path + ".", "half_width", s.half_width);
  }
  if (s.degree < 2 || s.degree > 32) throw InputError(loc(c, *n, path + ".degree"), "degree must be between 2 and 32");
  return s;
}

std::vector<std::string> read_xc(const Ctx& c, const toml::node* n, const std::string& path) {
  if (!n) return {};
  if (auto s = n->value<std::string>()) {
    std::vector<std::string> out;
    std::stringstream ss(*s);
    std::string item;
    while (std::getline(ss, item, '+')) {
      const auto b = item.find_first_not_of(" \t"), e = item.find_last_not_of(" \t");
      if (b != std::string::npos) out.push_back(item.substr(b, e - b + 1));
    }
    return out;
  }
  if (const toml::array* a = n->as_array()) {
    std::vector<std::string> out;
    for (const auto& e : *a) {
      if (auto s = e.value<std::string>())
        out.push_back(*s);
      else if (auto i = e.value<int64_t>())
        out.push_back(std::to_string(*i));
      else
        throw InputError(loc(c, e, path), "expected libxc functional names");
    }
    return out;
  }
  throw InputError(loc(c, *n, path), "expected a functional name or a list of names");
}

SystemSpec read_system(const Ctx& c, const toml::table& t, int index, double threshold) {
  const std::string path = "system[" + std::to_string(index) + "]";
  const std::string p = path + ".";
  SystemSpec s;
  s.name = get_string(c, t, p, "name", "system" + std::to_string(index + 1));
  const std::string kind = get_string(c, t, p, "kind", "");
  if (kind == "atom") {
    s.geometry = Geometry::Radial;
    check_keys(c, t, path, {"name", "kind", "xc", "charge", "spin", "grid", "element", "Z", "configuration"});
  } else if (kind == "line") {
    s.geometry = Geometry::Line;
    check_keys(c, t, path,
               {"name", "kind", "xc", "charge", "spin", "grid", "nucleus", "potential", "electron_softening",
                "interacting", "nucleus_softening", "n_up", "n_down", "occupations", "extra_states"});
  } else {
    const toml::node* n = t.get("kind");
    throw InputError(n ? loc(c, *n, p + "kind") : SourceLocation{c.file, 0, 0, p + "kind"},
                     "kind must be \"atom\" (spherical atom or ion) or \"line\" (1D model system)");
  }
  s.charge = get_number(c, t, p, "charge", 0.0);
  const std::string spin = get_string(c, t, p, "spin", "unpolarized");
  if (spin == "polarized")
    s.spin_polarized = true;
  else if (spin != "unpolarized")
    throw InputError(loc(c, *t.get("spin"), p + "spin"), "spin must be \"unpolarized\" or \"polarized\"");
  s.xc = read_xc(c, t.get("xc"), p + "xc");
  s.grid = read_grid(c, t.get("grid"), s.geometry, p + "grid", s.grid_name);
  (void)threshold;
  if (s.geometry == Geometry::Radial) {
    const toml::node* el = t.get("element");
    const toml::node* z = t.get("Z");
    if (el && z) throw InputError(loc(c, *z, p + "Z"), "give either element or Z, not both");
    if (el) {
      auto sym = el->value<std::string>();
      if (!sym) throw InputError(loc(c, *el, p + "element"), "expected an element symbol such as \"Ne\"");
      s.atom.Z = atomic_number(*sym, loc(c, *el, p + "element"));
    } else if (z) {
      s.atom.Z = get_int(c, t, p, "Z", 1);
      if (s.atom.Z < 1 || s.atom.Z > 118) throw InputError(loc(c, *z, p + "Z"), "Z must be between 1 and 118");
    } else {
      throw InputError(SourceLocation{c.file, static_cast<int>(t.source().begin.line), 0, p + "element"},
                       "an atom needs element = \"Symbol\" or Z = number");
    }
    if (std::abs(s.charge - std::round(s.charge)) > 1e-12) {
      if (!t.contains("configuration"))
        throw InputError(loc(c, *t.get("charge"), p + "charge"), "a fractional charge needs an explicit configuration");
    }
    if (const toml::node* cf = t.get("configuration")) {
      auto text = cf->value<std::string>();
      if (!text) throw InputError(loc(c, *cf, p + "configuration"), "expected a string such as \"[Ne] 3s2 3p1\"");
      s.atom.configuration = parse_configuration(*text, loc(c, *cf, p + "configuration"));
    } else {
      s.atom.configuration =
          parse_configuration(default_configuration(s.atom.Z, static_cast<int>(std::lround(s.charge)),
                                                    SourceLocation{c.file, static_cast<int>(t.source().begin.line), 0, p + "charge"}));
    }
    const double ne = electron_count(s.atom.configuration);
    if (std::abs(ne - (s.atom.Z - s.charge)) > 1e-9) {
      const toml::node* cf = t.get("configuration");
      std::ostringstream m;
      m << "the configuration holds " << ne << " electrons but Z - charge = " << s.atom.Z - s.charge;
      throw InputError(cf ? loc(c, *cf, p + "configuration") : SourceLocation{c.file, 0, 0, p + "charge"}, m.str());
    }
    return s;
  }
  LineSystem& ls = s.line;
  ls.electron_softening = get_number(c, t, p, "electron_softening", ls.electron_softening);
  ls.interacting = get_bool(c, t, p, "interacting", ls.interacting);
  ls.nucleus_softening = get_number(c, t, p, "nucleus_softening", ls.nucleus_softening);
  if (!(ls.electron_softening > 0))
    throw InputError(loc(c, *t.get("electron_softening"), p + "electron_softening"), "must be positive");
  if (const toml::node* nn = t.get("nucleus")) {
    const toml::array* arr = nn->as_array();
    if (!arr) throw InputError(loc(c, *nn, p + "nucleus"), "expected [[system.nucleus]] tables");
    int i = 0;
    for (const auto& e : *arr) {
      const toml::table* nt = e.as_table();
      const std::string np = p + "nucleus[" + std::to_string(i++) + "]";
      if (!nt) throw InputError(loc(c, e, np), "expected a table with charge, position, softening");
      check_keys(c, *nt, np, {"charge", "position", "softening"});
      Nucleus1d nuc;
      nuc.charge = get_number(c, *nt, np + ".", "charge", nuc.charge);
      nuc.position = get_number(c, *nt, np + ".", "position", nuc.position);
      nuc.softening = get_number(c, *nt, np + ".", "softening", nuc.softening);
      if (!(nuc.softening > 0)) throw InputError(loc(c, *nt, np + ".softening"), "must be positive");
      ls.nuclei.push_back(nuc);
    }
  }
  if (const toml::node* pn = t.get("potential")) {
    const toml::array* arr = pn->as_array();
    if (!arr) throw InputError(loc(c, *pn, p + "potential"), "expected [[system.potential]] tables");
    int i = 0;
    for (const auto& e : *arr) {
      const toml::table* pt = e.as_table();
      const std::string pp = p + "potential[" + std::to_string(i++) + "]";
      if (!pt) throw InputError(loc(c, e, pp), "expected a table");
      const std::string k = get_string(c, *pt, pp + ".", "kind", "");
      ExternalTerm term;
      if (k == "harmonic") {
        check_keys(c, *pt, pp, {"kind", "omega", "center"});
        term.kind = ExternalTerm::Kind::Harmonic;
        term.omega = get_number(c, *pt, pp + ".", "omega", term.omega);
        term.center = get_number(c, *pt, pp + ".", "center", 0.0);
      } else if (k == "gaussian") {
        check_keys(c, *pt, pp, {"kind", "depth", "center", "width"});
        term.kind = ExternalTerm::Kind::Gaussian;
        term.depth = get_number(c, *pt, pp + ".", "depth", term.depth);
        term.center = get_number(c, *pt, pp + ".", "center", 0.0);
        term.width = get_number(c, *pt, pp + ".", "width", term.width);
        if (!(term.width > 0)) throw InputError(loc(c, *pt->get("width"), pp + ".width"), "must be positive");
      } else if (k == "table") {
        check_keys(c, *pt, pp, {"kind", "file"});
        const std::string f = get_string(c, *pt, pp + ".", "file", "");
        if (f.empty()) throw InputError(loc(c, *pt, pp + ".file"), "a table potential needs file = \"path.csv\"");
        fs::path fp(f);
        if (fp.is_relative()) fp = c.dir / fp;
        term = read_potential_table(fp.string());
      } else {
        const toml::node* kn = pt->get("kind");
        throw InputError(kn ? loc(c, *kn, pp + ".kind") : loc(c, *pt, pp + ".kind"),
                         "potential kind must be \"harmonic\", \"gaussian\" or \"table\"");
      }
      ls.potentials.push_back(term);
    }
  }
  if (ls.nuclei.empty() && ls.potentials.empty())
    throw InputError(SourceLocation{c.file, static_cast<int>(t.source().begin.line), 0, p + "nucleus"},
                     "a line system needs at least one [[system.nucleus]] or [[system.potential]]");
  if (t.contains("n_up")) s.n_up = get_number(c, t, p, "n_up", 0.0);
  if (t.contains("n_down")) s.n_down = get_number(c, t, p, "n_down", 0.0);
  if ((s.n_up || s.n_down) && !s.spin_polarized)
    throw InputError(loc(c, t.contains("n_up") ? *t.get("n_up") : *t.get("n_down"), p + "n_up"),
                     "n_up / n_down need spin = \"polarized\"");
  s.extra_states = get_int(c, t, p, "extra_states", s.extra_states);
  if (s.extra_states < 0) throw InputError(loc(c, *t.get("extra_states"), p + "extra_states"), "must be >= 0");
  if (const toml::node* on = t.get("occupations")) {
    if (const toml::table* ot = on->as_table()) {
      check_keys(c, *ot, p + "occupations", {"up", "down"});
      if (!s.spin_polarized) throw InputError(loc(c, *on, p + "occupations"), "up/down occupations need spin = \"polarized\"");
      s.occupations.resize(2);
      if (ot->get("up")) s.occupations[0] = number_list(c, *ot->get("up"), p + "occupations.up");
      if (ot->get("down")) s.occupations[1] = number_list(c, *ot->get("down"), p + "occupations.down");
    } else {
      if (s.spin_polarized)
        throw InputError(loc(c, *on, p + "occupations"), "spin-polarized occupations are given as {up = [...], down = [...]}");
      s.occupations = {number_list(c, *on, p + "occupations")};
    }
  }
  if (!ls.interacting && !s.xc.empty()) {
    throw InputError(loc(c, *t.get("xc"), p + "xc"), "a non-interacting system (interacting = false) cannot have xc");
  }
  const double ne = s.electron_count();
  if (!(ne > 0))
    throw InputError(SourceLocation{c.file, static_cast<int>(t.source().begin.line), 0, p + "charge"},
                     "impossible electron count " + std::to_string(ne) + " (nuclear charge minus charge)");
  return s;
}

SolveInput parse_table(const toml::table& root, const Ctx& c) {
  check_keys(c, root, "", {"system", "scf"});
  SolveInput in;
  in.file = c.file;
  if (const toml::node* sn = root.get("scf")) {
    const toml::table* st = sn->as_table();
    if (!st) throw InputError(loc(c, *sn, "scf"), "expected a [scf] table");
    in.scf = read_scf(c, *st, in.scf, in.density_threshold);
  }
  const toml::node* sys = root.get("system");
  if (!sys) throw InputError(SourceLocation{c.file, 0, 0, "system"}, "no [[system]] given");
  const toml::array* arr = sys->as_array();
  if (!arr) throw InputError(loc(c, *sys, "system"), "use [[system]] (an array of tables)");
  int i = 0;
  std::set<std::string> names;
  for (const auto& e : *arr) {
    const toml::table* t = e.as_table();
    if (!t) throw InputError(loc(c, e, "system"), "expected a table");
    SystemSpec s = read_system(c, *t, i, in.density_threshold);
    if (!names.insert(s.name).second)
      throw InputError(loc(c, *t, "system[" + std::to_string(i) + "].name"), "duplicate system name '" + s.name + "'");
    in.systems.push_back(std::move(s));
    ++i;
  }
  return in;
}

SolveInput parse_with(const std::string& text, const std::string& name) {
  Ctx c{name, fs::path(name).parent_path()};
  toml::table root;
  try {
    root = toml::parse(text, std::string{name});
  } catch (const toml::parse_error& e) {
    const auto& s = e.source();
    throw InputError(SourceLocation{name, static_cast<int>(s.begin.line), static_cast<int>(s.begin.column), ""},
                     std::string(e.description()));
  }
  return parse_table(root, c);
}

}  // namespace

SolveInput parse_solve_input(const std::string& text, const std::string& name) { return parse_with(text, name); }

SolveInput read_solve_input(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  if (!f) throw InputError(SourceLocation{path, 0, 0, ""}, "cannot open input file");
  std::stringstream ss;
  ss << f.rdbuf();
  return parse_with(ss.str(), path);
}

}  // namespace stillpoint
