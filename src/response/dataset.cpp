#include "response/dataset.hpp"

#include <algorithm>
#include <filesystem>
#include <set>

#include "common/toml_input.hpp"
#include "stillpoint/common/errors.hpp"

namespace stillpoint::detail {

namespace {

namespace fs = std::filesystem;

const std::vector<std::string> kDatasetKeys{"manifest",      "set",          "xc",           "xc_weights",
                                            "xc_parameters", "spin",         "entries",      "energy_weight",
                                            "density_weight", "homo_weight", "density_region"};

double weight_key(const std::string& file, const toml::table& t, const std::string& path, const char* key, double def) {
  const toml::node* n = t.get(key);
  if (!n) return def;
  auto v = n->value<double>();
  if (!n->is_number() || !v || !(*v >= 0) || !std::isfinite(*v))
    throw InputError(location(file, *n, path + "." + key), "expected a weight >= 0");
  return *v;
}

}  // namespace

void expand_datasets(toml::table& root, const std::string& file) {
  const toml::node* dn = root.get("dataset");
  if (!dn) return;
  const toml::array* datasets = dn->as_array();
  if (!datasets) throw InputError(location(file, *dn, "dataset"), "use [[dataset]] tables");
  if (!root.get("system")) root.insert("system", toml::array{});
  if (!root.get("loss")) root.insert("loss", toml::array{});
  toml::array* systems = root.get("system")->as_array();
  toml::array* losses = root.get("loss")->as_array();
  if (!systems || !losses) return;  // the regular readers report the wrong shape
  std::set<std::string> names;
  for (const auto& s : *systems)
    if (const toml::table* t = s.as_table())
      if (auto n = t->get("name") ? t->get("name")->value<std::string>() : std::nullopt) names.insert(*n);
  int di = 0;
  for (const auto& d : *datasets) {
    const std::string path = "dataset[" + std::to_string(di++) + "]";
    const toml::table* t = d.as_table();
    if (!t) throw InputError(location(file, d, path), "expected a table");
    for (const auto& [k, v] : *t) {
      const std::string key(k.str());
      if (std::find(kDatasetKeys.begin(), kDatasetKeys.end(), key) != kDatasetKeys.end()) continue;
      const std::string near = nearest_word(key, kDatasetKeys);
      throw InputError(location(file, v, path + "." + key),
                       "unknown key" + (near.empty() ? std::string() : "; did you mean '" + near + "'?"));
    }
    const toml::node* mn = t->get("manifest");
    if (!mn || !mn->is_string())
      throw InputError(mn ? location(file, *mn, path + ".manifest") : location(file, *t, path + ".manifest"),
                       "a dataset needs manifest = \"folder written by stillpoint exact\"");
    fs::path mp(mn->as_string()->get());
    if (mp.is_relative()) mp = fs::path(file).parent_path() / mp;
    std::error_code ec;
    if (fs::is_directory(mp, ec)) mp /= "manifest.toml";
    if (!fs::exists(mp)) throw InputError(location(file, *mn, path + ".manifest"), "file not found: " + mp.string());
    mp = fs::absolute(mp);  // the readers resolve relative paths against the workflow file
    if (!t->get("xc"))
      throw InputError(location(file, *t, path + ".xc"), "a dataset needs xc = [...]: the functional to fit on its systems");
    toml::table manifest;
    try {
      manifest = toml::parse_file(mp.string());
    } catch (const toml::parse_error& e) {
      const auto& s = e.source();
      throw InputError(SourceLocation{mp.string(), static_cast<int>(s.begin.line), static_cast<int>(s.begin.column), ""},
                       "TOML syntax error: " + std::string(e.description()));
    }
    if (manifest["format"].value<std::string>().value_or("") != "stillpoint-exact-manifest" ||
        manifest["version"].value<int64_t>().value_or(0) != 1)
      throw InputError(location(file, *mn, path + ".manifest"),
                       mp.string() + " is not a version-1 manifest of stillpoint exact (docs/exact.md)");
    const toml::array* entries = manifest.get("entry") ? manifest.get("entry")->as_array() : nullptr;
    if (!entries || entries->empty()) throw InputError(location(file, *mn, path + ".manifest"), mp.string() + " lists no entries");
    std::set<std::string> wanted;
    if (const toml::node* en = t->get("entries")) {
      const toml::array* a = en->as_array();
      if (!a) throw InputError(location(file, *en, path + ".entries"), "expected a list of entry names");
      std::vector<std::string> available;
      for (const auto& e : *entries)
        if (const toml::table* et = e.as_table()) available.push_back((*et)["name"].value<std::string>().value_or(""));
      for (const auto& e : *a) {
        auto n = e.value<std::string>();
        if (!n || std::find(available.begin(), available.end(), *n) == available.end()) {
          const std::string near = n ? nearest_word(*n, available) : std::string();
          throw InputError(location(file, e, path + ".entries"), "not an entry of " + mp.string() +
                                                                     (near.empty() ? "" : "; did you mean '" + near + "'?"));
        }
        wanted.insert(*n);
      }
    }
    const double we = weight_key(file, *t, path, "energy_weight", 1.0);
    const double wd = weight_key(file, *t, path, "density_weight", 1.0);
    const double wh = weight_key(file, *t, path, "homo_weight", 0.0);
    const std::string set = (*t)["set"].value<std::string>().value_or("training");
    for (const auto& e : *entries) {
      const toml::table* et = e.as_table();
      if (!et) continue;
      const std::string name = (*et)["name"].value<std::string>().value_or("");
      if (!wanted.empty() && !wanted.count(name)) continue;
      const toml::table* st = (*et)["system"].as_table();
      const auto energy = (*et)["energy"].value<double>();
      const auto homo = (*et)["homo"].value<double>();
      const auto electrons = (*et)["electrons"].value<int64_t>();
      const auto dfile = (*et)["density_file"].value<std::string>();
      if (!st || !energy || !homo || !electrons || !dfile || name.empty())
        throw InputError(SourceLocation{mp.string(), 0, 0, "entry"}, "entry '" + name + "' lacks name, system, energy, homo, "
                                                                       "electrons or density_file (docs/exact.md)");
      if (!names.insert(name).second)
        throw InputError(location(file, *mn, path + ".manifest"),
                         "entry '" + name + "' has the name of another system of this workflow; names must be unique");
      toml::table sys = *st;
      sys.insert_or_assign("name", name);
      for (const char* k : {"xc", "xc_weights", "xc_parameters"})
        if (const toml::node* v = t->get(k)) sys.insert_or_assign(k, *v);
      sys.insert_or_assign("spin", (*t)["spin"].value<std::string>().value_or(*electrons == 1 ? "polarized" : "unpolarized"));
      // Table potentials are relative to the manifest; make them absolute for the reader.
      if (toml::array* pots = sys["potential"].as_array())
        for (auto& p : *pots)
          if (toml::table* pt = p.as_table())
            if (auto f = (*pt)["file"].value<std::string>(); f && fs::path(*f).is_relative())
              pt->insert_or_assign("file", (mp.parent_path() / *f).string());
      systems->push_back(std::move(sys));
      fs::path df(*dfile);
      if (df.is_relative()) df = mp.parent_path() / df;
      auto term = [&](const char* kind, double w) {
        toml::table l;
        l.insert("kind", kind);
        l.insert("system", name);
        l.insert("weight", w);
        l.insert("set", set);
        return l;
      };
      if (we > 0) {
        toml::table l = term("energy", we);
        l.insert("target", *energy);
        losses->push_back(std::move(l));
      }
      if (wd > 0) {
        toml::table l = term("density", wd);
        l.insert("reference", df.string());
        if (const toml::node* r = t->get("density_region")) l.insert("region", *r);
        losses->push_back(std::move(l));
      }
      if (wh > 0) {
        toml::table l = term("eigenvalue", wh);
        l.insert("state", "homo");
        l.insert("target", *homo);
        losses->push_back(std::move(l));
      }
    }
  }
}

}  // namespace stillpoint::detail
