// Input files of `stillpoint exact`: [[system]] tables (read by the shared reader), an optional
// [exact] table and an optional [exact.batch] family. Documented in docs/exact.md.
#include <toml++/toml.h>

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <filesystem>
#include <set>
#include <sstream>

#include "common/toml_input.hpp"
#include "ks/input_detail.hpp"
#include "stillpoint/exact/two_electron.hpp"

namespace stillpoint {

namespace {

namespace fs = std::filesystem;
using detail::bool_key;
using detail::key_location;
using detail::location;
using detail::number_key;

std::string num(double v) { return detail::format_number(v, 10); }

int get_int(const std::string& file, const toml::table& t, const std::string& path, const std::string& key, int def) {
  return detail::int_key(file, t, path, key, def, -1000000000, 1000000000, "expected an integer");
}

ExactOptions read_options(const std::string& file, const toml::table& t) {
  const std::string p = "exact";
  detail::check_keys(file, t, p,
                     {"states", "triplet", "residual_tolerance", "max_iterations", "trust_density", "convergence_check",
                      "pair_density", "batch"},
                     /*list_valid=*/true);
  ExactOptions o;
  o.states = get_int(file, t, p, "states", o.states);
  if (o.states < 1 || o.states > 64) throw InputError(key_location(file, t, p, "states"), "must be between 1 and 64");
  o.triplet = bool_key(file, t, p, "triplet", o.triplet);
  o.residual_tolerance = number_key(file, t, p, "residual_tolerance", o.residual_tolerance);
  if (!(o.residual_tolerance > 0 && o.residual_tolerance <= 1e-4))
    throw InputError(key_location(file, t, p, "residual_tolerance"),
                     "must be in (0, 1e-4] hartree (energies are converged to about residual^2 / gap)");
  o.max_iterations = get_int(file, t, p, "max_iterations", o.max_iterations);
  if (o.max_iterations < 1) throw InputError(key_location(file, t, p, "max_iterations"), "must be >= 1");
  o.trust_density = number_key(file, t, p, "trust_density", o.trust_density);
  if (!(o.trust_density > 0 && o.trust_density < 1))
    throw InputError(key_location(file, t, p, "trust_density"), "must be in (0, 1) electrons/bohr");
  o.convergence_check = bool_key(file, t, p, "convergence_check", o.convergence_check);
  o.pair_density = bool_key(file, t, p, "pair_density", o.pair_density);
  return o;
}

/// One step of a parameter path: a key, optionally indexed ("nucleus[0]").
struct PathStep {
  std::string key;
  int index = -1;
};

std::vector<PathStep> parse_path(const std::string& path, const SourceLocation& where) {
  std::vector<PathStep> out;
  std::stringstream ss(path);
  std::string part;
  const std::string hint = " (write e.g. \"nucleus[0].charge\", \"electron_softening\" or \"bond_length\")";
  while (std::getline(ss, part, '.')) {
    PathStep s;
    const auto br = part.find('[');
    s.key = part.substr(0, br);
    if (s.key.empty()) throw InputError(where, "cannot read the parameter path '" + path + "'" + hint);
    for (char ch : s.key)
      if (!(std::isalnum(static_cast<unsigned char>(ch)) || ch == '_'))
        throw InputError(where, "cannot read the parameter path '" + path + "'" + hint);
    if (br != std::string::npos) {
      const auto close = part.find(']', br);
      const std::string idx = part.substr(br + 1, close == std::string::npos ? std::string::npos : close - br - 1);
      if (close != part.size() - 1 || idx.empty() || idx.find_first_not_of("0123456789") != std::string::npos)
        throw InputError(where, "cannot read the index in '" + part + "' of the parameter path '" + path + "'" + hint);
      s.index = std::stoi(idx);
    }
    out.push_back(s);
  }
  if (out.empty() || out.back().index >= 0) throw InputError(where, "the parameter path '" + path + "' must end in a key" + hint);
  return out;
}

/// Sets the number at `path` inside a [[system]] table (the last key may be new).
void set_path(toml::table& sys, const std::vector<PathStep>& steps, const std::string& path, double value,
              const std::string& sys_name, const SourceLocation& where) {
  toml::table* t = &sys;
  for (std::size_t i = 0; i + 1 < steps.size(); ++i) {
    const PathStep& s = steps[i];
    toml::node* n = t->get(s.key);
    if (!n) throw InputError(where, "system '" + sys_name + "' has no '" + s.key + "' (parameter " + path + ")");
    if (s.index >= 0) {
      toml::array* a = n->as_array();
      if (!a || s.index >= static_cast<int>(a->size()))
        throw InputError(where, "system '" + sys_name + "' has no " + s.key + "[" + std::to_string(s.index) + "] (parameter " +
                                    path + ", indices count from 0)");
      n = a->get(static_cast<std::size_t>(s.index));
    }
    t = n ? n->as_table() : nullptr;
    if (!t) throw InputError(where, "'" + s.key + "' of system '" + sys_name + "' is not a table (parameter " + path + ")");
  }
  const std::string& last = steps.back().key;
  if (const toml::node* old = t->get(last); old && !old->is_number())
    throw InputError(where, "'" + path + "' of system '" + sys_name + "' is not a number");
  t->insert_or_assign(last, value);
}

void set_bond_length(toml::table& sys, double R, const std::string& sys_name, const SourceLocation& where) {
  toml::array* a = sys.get("nucleus") ? sys.get("nucleus")->as_array() : nullptr;
  if (!a || a->size() != 2)
    throw InputError(where, "parameter bond_length needs a system with exactly two [[system.nucleus]] blocks; system '" +
                                sys_name + "' has " + std::to_string(a ? a->size() : 0));
  double mid = 0.0;
  for (auto& e : *a) {
    const toml::table* nt = e.as_table();
    mid += nt && nt->get("position") ? nt->get("position")->value<double>().value_or(0.0) : 0.0;
  }
  mid *= 0.5;
  int i = 0;
  for (auto& e : *a) {
    toml::table* nt = e.as_table();
    if (!nt) throw InputError(where, "system '" + sys_name + "': nucleus entries must be tables");
    nt->insert_or_assign("position", mid + (i++ == 0 ? -0.5 : 0.5) * R);
  }
}

struct Batch {
  std::vector<std::string> parameters;
  std::vector<std::vector<PathStep>> steps;  // empty for bond_length
  std::vector<double> values;
  std::vector<SourceLocation> value_at;
  SourceLocation parameter_at;
  /// Adjust each member's charge so that it keeps the template's electron count.
  bool fixed_electrons = true;
};

Batch read_batch(const std::string& file, const toml::node& bn) {
  const std::string p = "exact.batch";
  const toml::table* t = bn.as_table();
  if (!t) throw InputError(location(file, bn, p), "expected an [exact.batch] table with parameter and values");
  detail::check_keys(file, *t, p, {"parameter", "values", "start", "stop", "count", "fixed_electrons"},
                     /*list_valid=*/true);
  Batch b;
  b.fixed_electrons = bool_key(file, *t, p, "fixed_electrons", b.fixed_electrons);
  const toml::node* pn = t->get("parameter");
  if (!pn) throw InputError(location(file, *t, p + ".parameter"), "a batch needs parameter = \"path\" (e.g. \"nucleus[0].charge\")");
  b.parameter_at = location(file, *pn, p + ".parameter");
  if (const auto* s = pn->as_string()) {
    b.parameters.push_back(s->get());
  } else if (const toml::array* a = pn->as_array()) {
    int i = 0;
    for (const auto& e : *a) {
      const auto* s = e.as_string();
      if (!s) throw InputError(location(file, e, p + ".parameter[" + std::to_string(i) + "]"), "expected a parameter path string");
      b.parameters.push_back(s->get());
      ++i;
    }
    if (b.parameters.empty()) throw InputError(b.parameter_at, "give at least one parameter path");
  } else {
    throw InputError(b.parameter_at, "expected a parameter path (string) or a list of them");
  }
  for (const auto& path : b.parameters) {
    if (path == "bond_length") {
      b.steps.emplace_back();
    } else {
      b.steps.push_back(parse_path(path, b.parameter_at));
    }
  }
  if (b.fixed_electrons && std::count(b.parameters.begin(), b.parameters.end(), std::string("charge")))
    throw InputError(b.parameter_at, "varying the charge needs fixed_electrons = false (by default each member keeps the "
                                     "electron count of its template by adjusting the charge)");
  if (std::count(b.parameters.begin(), b.parameters.end(), std::string("bond_length")) && b.parameters.size() > 1)
    throw InputError(b.parameter_at, "bond_length cannot be combined with other parameters");
  const toml::node* vn = t->get("values");
  const bool has_range = t->contains("start") || t->contains("stop") || t->contains("count");
  if (vn && has_range) throw InputError(location(file, *vn, p + ".values"), "give either values = [...] or start, stop and count, not both");
  if (vn) {
    const toml::array* a = vn->as_array();
    if (!a) throw InputError(location(file, *vn, p + ".values"), "expected a list of numbers, e.g. values = [1.0, 1.5, 2.0]");
    int i = 0;
    for (const auto& e : *a) {
      const std::string key = p + ".values[" + std::to_string(i++) + "]";
      b.values.push_back(detail::finite_number(file, e, key));
      b.value_at.push_back(location(file, e, key));
    }
    if (b.values.empty()) throw InputError(location(file, *vn, p + ".values"), "the list of values is empty");
  } else if (has_range) {
    for (const char* k : {"start", "stop", "count"})
      if (!t->contains(k)) throw InputError(location(file, *t, p + "." + k), std::string("a range needs start, stop and count (") + k + " is missing)");
    const double start = number_key(file, *t, p, "start", 0.0), stop = number_key(file, *t, p, "stop", 0.0);
    const int count = get_int(file, *t, p, "count", 0);
    if (count < 1 || count > 10000) throw InputError(key_location(file, *t, p, "count"), "must be between 1 and 10000");
    if (count == 1 && start != stop) throw InputError(key_location(file, *t, p, "count"), "count = 1 needs start = stop");
    for (int i = 0; i < count; ++i) {
      // Rounded to 12 significant digits, so that 1 + 2 * 2/10 is written as 1.4.
      const double v = count == 1 ? start : start + (stop - start) * i / (count - 1);
      char buf[32];
      std::snprintf(buf, sizeof buf, "%.12g", v);
      b.values.push_back(std::strtod(buf, nullptr));
      b.value_at.push_back(key_location(file, *t, p, "start"));
    }
  } else {
    throw InputError(location(file, *t, p + ".values"), "a batch needs values = [...] or start, stop and count");
  }
  if (b.values.size() > 10000) throw InputError(location(file, *vn, p + ".values"), "at most 10000 values");
  return b;
}

/// A [[system]] table as the manifest stores it: the resolved grid, absolute table paths.
toml::table canonical_system_table(const toml::table& in, const SystemSpec& s, const fs::path& input_dir) {
  toml::table t = in;
  t.insert_or_assign("name", s.name);
  toml::table g;
  g.insert("degree", static_cast<int64_t>(s.grid.degree));
  g.insert("element_size", s.grid.element_size);
  g.insert("half_width", s.grid.half_width);
  t.insert_or_assign("grid", g);
  if (toml::array* pots = t.get("potential") ? t.get("potential")->as_array() : nullptr)
    for (auto& e : *pots)
      if (toml::table* pt = e.as_table())
        if (const toml::node* f = pt->get("file"); f && f->is_string()) {
          fs::path fp(f->value<std::string>().value_or(""));
          if (fp.is_relative()) fp = input_dir / fp;
          std::error_code ec;
          const fs::path abs = fs::weakly_canonical(fs::absolute(fp), ec);
          pt->insert_or_assign("file", (ec ? fs::absolute(fp) : abs).string());
        }
  return t;
}

std::string to_text(const toml::table& t) {
  std::ostringstream os;
  os << toml::toml_formatter{t};
  return os.str();
}

/// Keys of [[system]] that mean nothing to an exact solution: refused (they would change
/// a Kohn–Sham calculation but cannot change the exact one) or ignored with a warning.
void check_system_scope(const std::string& file, const toml::table& t, const SystemSpec& s, const std::string& path,
                        ExactInput& in) {
  if (s.geometry != Geometry::Line)
    throw InputError(key_location(file, t, path, "kind"),
                     "exact solutions are for line systems (kind = \"line\") only; system '" + s.name + "' is an atom");
  for (const char* k : {"n_up", "n_down", "occupations", "unoccupied_levels"})
    if (t.contains(k))
      throw InputError(key_location(file, t, path, k),
                       std::string("'") + k + "' is a Kohn–Sham setting and has no meaning for an exact solution; the exact "
                       "solver computes the singlet and triplet states itself (see [exact] states and triplet)");
  if (s.spin_polarized)
    throw InputError(key_location(file, t, path, "spin"),
                     "spin = \"polarized\" has no meaning for an exact solution (singlets and triplets are both computed)");
  const double ne = s.electron_count();
  if (std::abs(ne - std::round(ne)) > 1e-9 || (std::round(ne) != 1.0 && std::round(ne) != 2.0)) {
    double q = 0.0;
    for (const auto& nuc : s.line.nuclei) q += nuc.charge;
    throw InputError(t.contains("charge") ? key_location(file, t, path, "charge") : key_location(file, t, path, "nucleus"),
                     "system '" + s.name + "' has " + num(ne) + " electrons (nuclear charge " + num(q) + " minus charge " +
                         num(s.charge) + "); exact solutions need exactly 1 or 2 electrons");
  }
  for (const char* k : {"xc", "xc_weights", "xc_parameters"})
    if (t.contains(k)) {
      in.warnings.push_back(key_location(file, t, path, k).describe() + ": ignored by exact (no functional is used)");
      break;
    }
}

ExactInput parse_root(toml::table root, const std::string& file) {
  ExactInput in;
  in.file = file;
  const fs::path dir = fs::path(file).parent_path();
  std::optional<Batch> batch;
  if (const toml::node* en = root.get("exact")) {
    const toml::table* et = en->as_table();
    if (!et) throw InputError(location(file, *en, "exact"), "expected an [exact] table");
    in.options = read_options(file, *et);
    if (const toml::node* bn = et->get("batch")) batch = read_batch(file, *bn);
  }
  if (root.contains("scf"))
    in.warnings.push_back(location(file, *root.get("scf"), "scf").describe() + ": ignored by exact (there is no SCF)");
  // Reads and validates every system as `solve` would (this also checks [[system]] exists).
  const SolveInput base = detail::parse_solve_root(root, file, {"exact"}, GridUse::Product);
  const toml::array& arr = *root.get("system")->as_array();
  std::set<std::string> names;
  for (std::size_t i = 0; i < base.systems.size(); ++i) {
    const toml::table& t = *arr.get(i)->as_table();
    const SystemSpec& s = base.systems[i];
    const std::string path = "system[" + std::to_string(i) + "]";
    if (!batch) {
      check_system_scope(file, t, s, path, in);
      in.systems.push_back(s);
      in.system_tables.push_back(to_text(canonical_system_table(t, s, dir)));
      in.system_locations.push_back(base.system_locations[i]);
      names.insert(s.name);
      continue;
    }
    if (s.geometry != Geometry::Line) check_system_scope(file, t, s, path, in);
    const int width = std::max(3, static_cast<int>(std::to_string(batch->values.size() - 1).size()));
    for (std::size_t v = 0; v < batch->values.size(); ++v) {
      const double value = batch->values[v];
      std::string idx = std::to_string(v);
      idx.insert(0, width - idx.size(), '0');
      const std::string member = s.name + "_" + idx;
      toml::table mt = t;
      for (std::size_t p = 0; p < batch->parameters.size(); ++p) {
        if (batch->steps[p].empty())
          set_bond_length(mt, value, s.name, batch->parameter_at);
        else
          set_path(mt, batch->steps[p], batch->parameters[p], value, s.name, batch->parameter_at);
      }
      mt.insert_or_assign("name", member);
      if (batch->fixed_electrons) {
        // charge = (sum of nuclear charges) - electrons of the template.
        double q = 0.0;
        if (const toml::array* nuc = mt.get("nucleus") ? mt.get("nucleus")->as_array() : nullptr)
          for (const auto& ne : *nuc)
            if (const toml::table* nt = ne.as_table())
              q += nt->get("charge") ? nt->get("charge")->value<double>().value_or(0.0) : 1.0;
        const double charge = q - s.electron_count();
        if (mt.contains("charge") || std::abs(charge) > 1e-12) mt.insert_or_assign("charge", charge);
      }
      toml::table one = root;
      one.erase("exact");
      toml::array sys_arr;
      sys_arr.push_back(mt);
      one.insert_or_assign("system", sys_arr);
      SystemSpec ms;
      try {
        ms = detail::parse_solve_root(one, file, {}, GridUse::Product).systems.front();
        check_system_scope(file, mt, ms, path, in);
      } catch (const InputError& e) {
        std::string what = e.what();
        throw InputError(batch->value_at[v], "with " + batch->parameters.front() + (batch->parameters.size() > 1 ? " (and the others)" : "") +
                                                 " = " + num(value) + " in system '" + s.name + "': " + what);
      }
      if (!names.insert(member).second)
        throw InputError(batch->value_at[v], "the batch member name '" + member + "' is already used by another system");
      in.systems.push_back(ms);
      in.system_tables.push_back(to_text(canonical_system_table(mt, ms, dir)));
      in.system_locations.push_back(base.system_locations[i]);
      in.batch_values.push_back(value);
      in.batch_templates.push_back(s.name);
    }
  }
  if (batch) in.batch_parameters = batch->parameters;
  // Warnings are reported once per distinct message.
  std::sort(in.warnings.begin(), in.warnings.end());
  in.warnings.erase(std::unique(in.warnings.begin(), in.warnings.end()), in.warnings.end());
  return in;
}

ExactInput parse_text(const std::string& text, const std::string& name) {
  return parse_root(detail::parse_toml(text, name), name);
}

}  // namespace

ExactInput parse_exact_input(const std::string& text, const std::string& name) { return parse_text(text, name); }

ExactInput read_exact_input(const std::string& path) {
  return parse_text(detail::read_text_file(path, "cannot open input file"), path);
}

}  // namespace stillpoint
