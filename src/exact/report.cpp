// Reports and files of `stillpoint exact`, and the reader of its manifest.
#include <toml++/toml.h>

#include <cmath>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <nlohmann/json.hpp>
#include <sstream>

#include "common/toml_input.hpp"
#include "ks/input_detail.hpp"
#include "common/format.hpp"
#include "stillpoint/exact/two_electron.hpp"

namespace stillpoint {

namespace {

namespace fs = std::filesystem;

std::string fmt(const char* f, double v) { return detail::printf_number(f, v); }

using detail::g17;

double min_trusted_x(const ExactResult& r, bool lowest) {
  double best = lowest ? 1e300 : -1e300;
  for (int k = 0; k < r.mesh.num_nodes(); ++k)
    if (r.ks.trusted[k]) best = lowest ? std::min(best, r.mesh.x()(k)) : std::max(best, r.mesh.x()(k));
  return best;
}

void require_finite(const ExactResult& r) {
  bool ok = r.density.allFinite() && r.ks.v_s.allFinite() && r.v_h.allFinite() && r.v_xc.allFinite() &&
            r.v_hxc.allFinite() && r.v_ext.allFinite() && std::isfinite(r.energy_minus_one) && r.ground_coefficients.allFinite();
  const ExactEnergyParts& E = r.energy;
  for (double v : {E.total, E.electronic, E.kinetic, E.external, E.electron_electron, E.nuclear_repulsion, E.kinetic_s,
                   E.hartree, E.exchange, E.correlation})
    ok = ok && std::isfinite(v);
  for (const auto& L : r.levels) ok = ok && std::isfinite(L.energy) && std::isfinite(L.residual) && L.density.allFinite();
  for (const auto& gc : r.grid_checks) {
    for (double d : gc.level_changes) ok = ok && std::isfinite(d);
    ok = ok && std::isfinite(gc.homo_change);
  }
  if (!ok) throw NumericalError("system '" + r.spec.name + "': the exact solution contains NaN or Inf; nothing was written");
}

std::string level_column(const ExactLevel& L) { return "n_" + L.spin + "_" + std::to_string(L.index) + "_per_bohr"; }

nlohmann::json result_json(const ExactResult& r, const std::string& density_file, const std::string& states_file,
                           const std::string& pair_file, const ExactInput& in, std::size_t index) {
  using nlohmann::json;
  json j;
  j["units"] = {{"energy", "hartree"}, {"length", "bohr"}, {"density", "electrons/bohr"}, {"potential", "hartree"}};
  json nuclei = json::array();
  for (const auto& n : r.spec.line.nuclei)
    nuclei.push_back({{"charge", n.charge}, {"position", n.position}, {"softening", n.softening}});
  j["system"] = {{"name", r.spec.name},
                 {"kind", "line"},
                 {"electrons", r.electrons},
                 {"charge", r.spec.charge},
                 {"nuclei", nuclei},
                 {"external_potentials", r.spec.line.potentials.size()},
                 {"electron_softening", r.spec.line.electron_softening},
                 {"interacting", r.spec.line.interacting}};
  j["grid"] = {{"preset", r.spec.grid_name},
               {"description", r.mesh.describe()},
               {"nodes", r.mesh.num_nodes()},
               {"degree", r.spec.grid.degree},
               {"element_size", r.spec.grid.element_size},
               {"half_width", r.spec.grid.half_width}};
  const ExactEnergyParts& E = r.energy;
  j["energy"] = {{"total", E.total},
                 {"electronic", E.electronic},
                 {"kinetic", E.kinetic},
                 {"external", E.external},
                 {"electron_electron", E.electron_electron},
                 {"nuclear_repulsion", E.nuclear_repulsion},
                 {"kohn_sham",
                  {{"kinetic_s", E.kinetic_s},
                   {"hartree", E.hartree},
                   {"exchange", E.exchange},
                   {"correlation", E.correlation},
                   {"kinetic_correlation", E.kinetic - E.kinetic_s}}}};
  j["energy_minus_one"] = r.energy_minus_one;
  j["homo"] = r.ks.homo;
  j["ionization_energy"] = -r.ks.homo;
  json levels = json::array();
  for (std::size_t i = 0; i < r.levels.size(); ++i) {
    const ExactLevel& L = r.levels[i];
    json lv = {{"spin", L.spin},
               {"index", L.index},
               {"energy", L.energy},
               {"excitation", L.energy - r.levels.front().energy},
               {"residual", L.residual},
               {"bound", L.bound}};
    lv["grid_error_estimate"] = i < r.level_error_estimates.size() ? json(r.level_error_estimates[i]) : json(nullptr);
    levels.push_back(lv);
  }
  j["levels"] = levels;
  j["threshold"] = r.threshold ? json(*r.threshold) : json(nullptr);
  j["kohn_sham_potential"] = {{"trust_density", r.ks.trust_density},
                              {"trusted_nodes", r.ks.trusted_nodes},
                              {"trusted_from", min_trusted_x(r, true)},
                              {"trusted_to", min_trusted_x(r, false)},
                              {"note", "v_s, v_hxc and v_xc are data only where trusted = 1 (n >= trust_density); "
                                       "elsewhere v_s holds the value of the nearest trusted node"}};
  json checks = json::array();
  for (const auto& gc : r.grid_checks)
    checks.push_back({{"kind", gc.kind},
                      {"degree", gc.degree},
                      {"half_width", gc.half_width},
                      {"nodes", gc.nodes},
                      {"level_changes", gc.level_changes},
                      {"homo_change", gc.homo_change},
                      {"max_change", gc.max_change}});
  j["grid_check"] = {{"checks", checks}};
  if (r.grid_error_estimate)
    j["grid_check"]["error_estimate"] = *r.grid_error_estimate;
  else
    j["grid_check"]["error_estimate"] = nullptr;
  j["solver"] = {{"method", r.electrons == 2 ? "block Davidson with a Kronecker (fast-diagonalization) preconditioner"
                                             : "dense symmetric eigensolver (LAPACK)"},
                 {"iterations", r.iterations},
                 {"hamiltonian_products", r.hamiltonian_products},
                 {"preconditioner_products", r.preconditioner_products},
                 {"residual_tolerance", r.electrons == 2 ? r.tolerance_used : 0.0},
                 {"seconds", r.seconds}};
  json files = {{"density", density_file}, {"states", states_file}};
  if (!pair_file.empty()) files["pair_density"] = pair_file;
  j["files"] = files;
  if (!in.batch_values.empty())
    j["batch"] = {{"parameter", in.batch_parameters}, {"value", in.batch_values[index]}, {"template", in.batch_templates[index]}};
  return j;
}

std::string density_csv(const ExactResult& r, double trust) {
  std::ostringstream s;
  s << "# exact ground state (" << r.levels.front().spin << ") of " << r.spec.name << ", " << r.electrons
    << " electron(s); x in bohr, n in electrons/bohr, potentials in hartree; trusted = 1 where n >= " << fmt("%.3g", trust)
    << " electrons/bohr, elsewhere v_s, v_hxc and v_xc are a continuation (the value of v_s at the nearest trusted node), "
       "not data\n";
  s << "x_bohr,n_per_bohr,quadrature_weight,v_ext_hartree,v_h_hartree,v_s_hartree,v_hxc_hartree,v_xc_hartree,trusted\n";
  for (int k = 0; k < r.mesh.num_nodes(); ++k)
    s << g17(r.mesh.x()(k)) << ',' << g17(r.density(k)) << ',' << g17(r.mesh.w()(k)) << ',' << g17(r.v_ext(k)) << ','
      << g17(r.v_h(k)) << ',' << g17(r.ks.v_s(k)) << ',' << g17(r.v_hxc(k)) << ',' << g17(r.v_xc(k)) << ','
      << static_cast<int>(r.ks.trusted[k]) << '\n';
  return s.str();
}

std::string states_csv(const ExactResult& r) {
  std::ostringstream s;
  s << "# densities of every computed state of " << r.spec.name << " (electrons/bohr; x in bohr); energies in hartree:";
  for (const auto& L : r.levels) s << ' ' << L.spin << '_' << L.index << '=' << g17(L.energy);
  s << "\nx_bohr,quadrature_weight";
  for (const auto& L : r.levels) s << ',' << level_column(L);
  s << '\n';
  for (int k = 0; k < r.mesh.num_nodes(); ++k) {
    s << g17(r.mesh.x()(k)) << ',' << g17(r.mesh.w()(k));
    for (const auto& L : r.levels) s << ',' << g17(L.density(k));
    s << '\n';
  }
  return s.str();
}

std::string pair_csv(const ExactResult& r) {
  std::ostringstream s;
  const Eigen::MatrixXd& C = r.ground_coefficients;
  const int first = r.mesh.first_unknown();
  s << "# pair density P(x1, x2) = 2 |Psi(x1, x2)|^2 of the ground state of " << r.spec.name
    << " (electrons^2/bohr^2; x in bohr), interior nodes; sum over nodes of w1 w2 P = 2 (weights in the density file)\n";
  s << "x1_bohr,x2_bohr,pair_density_per_bohr2\n";
  for (int j = 0; j < C.cols(); ++j)
    for (int i = 0; i < C.rows(); ++i) {
      const double wij = r.mesh.w()(first + i) * r.mesh.w()(first + j);
      s << g17(r.mesh.x()(first + i)) << ',' << g17(r.mesh.x()(first + j)) << ',' << g17(2.0 * C(i, j) * C(i, j) / wij) << '\n';
    }
  return s.str();
}

/// Table-potential paths relative to the output directory (they are absolute in the input).
void relativize_files(toml::table& sys, const fs::path& out_dir) {
  toml::array* pots = sys.get("potential") ? sys.get("potential")->as_array() : nullptr;
  if (!pots) return;
  std::error_code ec;
  const fs::path base = fs::weakly_canonical(fs::absolute(out_dir.empty() ? fs::path(".") : out_dir), ec);
  for (auto& e : *pots)
    if (toml::table* pt = e.as_table())
      if (const toml::node* f = pt->get("file"); f && f->is_string()) {
        const fs::path abs(f->value<std::string>().value_or(""));
        std::error_code ec2;
        const fs::path rel = fs::relative(abs, base, ec2);
        if (!ec2 && !rel.empty()) pt->insert_or_assign("file", rel.generic_string());
      }
}

}  // namespace

std::string format_exact_result(const ExactResult& r) {
  std::ostringstream s;
  s << r.spec.name << ": " << r.electrons << " electron" << (r.electrons == 2 ? "s" : "")
    << " on the line (energies in hartree, lengths in bohr)\n";
  s << "  grid: " << r.mesh.describe() << " (" << r.spec.grid_name << ")\n";
  const bool estimates = r.level_error_estimates.size() == r.levels.size();
  s << "  state          energy (Ha)          excitation (Ha)   residual (Ha)" << (estimates ? "   grid est. (Ha)" : "")
    << "\n";
  bool any_unbound = false;
  for (std::size_t i = 0; i < r.levels.size(); ++i) {
    const ExactLevel& L = r.levels[i];
    char buf[200];
    std::snprintf(buf, sizeof buf, "  %-8s %2d   % .10f   % .10f     %.1e", L.spin.c_str(), L.index, L.energy,
                  L.energy - r.levels.front().energy, L.residual);
    s << buf;
    if (estimates) s << "         " << fmt("%.1e", r.level_error_estimates[i]);
    if (!L.bound) s << "   unbound";
    any_unbound = any_unbound || !L.bound;
    s << "\n";
  }
  if (any_unbound)
    s << "  unbound: above the threshold E(" << r.electrons - 1 << " electron" << (r.electrons - 1 == 1 ? "" : "s")
      << ", same potential) = " << fmt("%.10f", *r.threshold)
      << " Ha; such a level is a state of the box (its energy follows half_width), not of the system\n";
  const ExactEnergyParts& E = r.energy;
  char buf[400];
  if (r.electrons == 2)
    std::snprintf(buf, sizeof buf,
                  "  E(1 electron, same potential) = %.10f Ha; HOMO = E(2) - E(1) = %.10f Ha (ionization energy %.10f Ha)\n",
                  r.energy_minus_one, r.ks.homo, -r.ks.homo);
  else
    std::snprintf(buf, sizeof buf, "  HOMO = E(1) - E(0) = %.10f Ha (ionization energy %.10f Ha)\n", r.ks.homo, -r.ks.homo);
  s << buf;
  std::snprintf(buf, sizeof buf, "  ground state: T = %.8f, V_ext = %.8f, V_ee = %.8f, E_nn = %.8f Ha\n", E.kinetic, E.external,
                E.electron_electron, E.nuclear_repulsion);
  s << buf;
  std::snprintf(buf, sizeof buf, "  Kohn-Sham view: T_s = %.8f, E_H = %.8f, E_x = %.8f, E_c = %.8f Ha\n", E.kinetic_s, E.hartree,
                E.exchange, E.correlation);
  s << buf;
  std::snprintf(buf, sizeof buf, "  exact v_s: trusted at %d of %d nodes (n >= %.3g electrons/bohr), x in [%.4g, %.4g] bohr\n",
                r.ks.trusted_nodes, r.mesh.num_nodes(), r.ks.trust_density, min_trusted_x(r, true), min_trusted_x(r, false));
  s << buf;
  for (const auto& gc : r.grid_checks) {
    if (gc.kind == "degree")
      std::snprintf(buf, sizeof buf, "  grid check, degree %d (%d nodes): max |change| %.2e Ha (HOMO %.2e Ha)\n", gc.degree,
                    gc.nodes, gc.max_change, std::abs(gc.homo_change));
    else
      std::snprintf(buf, sizeof buf, "  grid check, box [-%.4g, %.4g] bohr (%d nodes): max |change| %.2e Ha (HOMO %.2e Ha)\n",
                    gc.half_width, gc.half_width, gc.nodes, gc.max_change, std::abs(gc.homo_change));
    s << buf;
  }
  if (r.grid_error_estimate)
    s << "  discretization error estimate " << fmt("%.2e", *r.grid_error_estimate)
      << " Ha (upper estimate: the largest change against the coarser grids, of the bound levels and the HOMO)\n";
  else
    s << "  grid check: not done (off, or the comparison grids are refused)\n";
  if (r.electrons == 2)
    std::snprintf(buf, sizeof buf, "  solver: %d Davidson iterations, %d H products, %d preconditioner products, %.2f s\n",
                  r.iterations, r.hamiltonian_products, r.preconditioner_products, r.seconds);
  else
    std::snprintf(buf, sizeof buf, "  solver: dense one-electron eigensolver, %.2f s\n", r.seconds);
  s << buf;
  return s.str();
}

std::vector<std::pair<std::string, std::string>> exact_output_files(const ExactInput& in,
                                                                    const std::vector<ExactResult>& results,
                                                                    const std::string& output_dir) {
  if (results.size() != in.systems.size()) throw std::logic_error("exact_output_files: one result per system");
  std::vector<std::pair<std::string, std::string>> files;
  toml::table manifest;
  manifest.insert("format", "stillpoint-exact-manifest");
  manifest.insert("version", 1);
  manifest.insert("source", in.file);
  manifest.insert("units", toml::table{{"energy", "hartree"}, {"length", "bohr"}, {"density", "electrons/bohr"},
                                       {"potential", "hartree"}});
  if (!in.batch_values.empty()) {
    toml::array params, values;
    for (const auto& p : in.batch_parameters) params.push_back(p);
    // The values of the first template (every template runs through the same list).
    for (std::size_t i = 0; i < in.batch_values.size() && in.batch_templates[i] == in.batch_templates.front(); ++i)
      values.push_back(in.batch_values[i]);
    manifest.insert("batch", toml::table{{"parameter", params}, {"values", values}});
  }
  toml::array entries;
  for (std::size_t i = 0; i < results.size(); ++i) {
    const ExactResult& r = results[i];
    require_finite(r);
    const std::string& name = r.spec.name;
    const std::string density_file = name + "_density.csv", states_file = name + "_states.csv",
                      json_file = name + ".json";
    const std::string pair_file = r.ground_coefficients.size() > 0 ? name + "_pair_density.csv" : std::string();
    files.emplace_back(json_file, result_json(r, density_file, states_file, pair_file, in, i).dump(2) + "\n");
    files.emplace_back(density_file, density_csv(r, r.ks.trust_density));
    files.emplace_back(states_file, states_csv(r));
    if (!pair_file.empty()) files.emplace_back(pair_file, pair_csv(r));

    toml::table e;
    e.insert("name", name);
    e.insert("electrons", static_cast<int64_t>(r.electrons));
    e.insert("ground_state", r.levels.front().spin);
    e.insert("energy", r.energy.total);
    e.insert("homo", r.ks.homo);
    e.insert("ionization_energy", -r.ks.homo);
    e.insert("energy_minus_one", r.energy_minus_one);
    e.insert("density_file", density_file);
    e.insert("states_file", states_file);
    e.insert("result_file", json_file);
    e.insert("trust_density", r.ks.trust_density);
    if (r.grid_error_estimate) e.insert("grid_error_estimate", *r.grid_error_estimate);
    if (!in.batch_values.empty()) {
      e.insert("template", in.batch_templates[i]);
      e.insert("batch_value", in.batch_values[i]);
    }
    toml::table sys;
    try {
      sys = toml::parse(in.system_tables[i], std::string{"system table"});
    } catch (const toml::parse_error& err) {
      throw std::logic_error(std::string("exact manifest: stored system table does not parse: ") + err.what());
    }
    relativize_files(sys, fs::path(output_dir));
    e.insert("system", std::move(sys));
    entries.push_back(std::move(e));
  }
  manifest.insert("entry", std::move(entries));
  std::ostringstream m;
  m << "# stillpoint exact manifest: one [[entry]] per system (docs/exact.md). Energies in hartree, lengths in bohr,\n"
       "# densities in electrons/bohr. entry.system is a [[system]] table that rebuilds the system exactly.\n";
  m << toml::toml_formatter{manifest} << "\n";
  files.emplace_back("manifest.toml", m.str());
  return files;
}

namespace {

SourceLocation at(const std::string& file, const toml::node& n, const std::string& key) {
  return detail::location(file, n, key);
}

template <class T>
T required(const std::string& file, const toml::table& t, const std::string& path, const std::string& key) {
  const toml::node* n = t.get(key);
  if (!n) throw InputError(at(file, t, path + "." + key), "missing in the manifest");
  auto v = n->value<T>();
  if (!v) throw InputError(at(file, *n, path + "." + key), "has the wrong type");
  return *v;
}

void read_density_file(const std::string& path, ExactManifestEntry& e) {
  std::istringstream f = detail::open_table(path, "cannot open the density file named in the manifest");
  std::string line;
  int lineno = 0;
  std::vector<std::string> header;
  std::vector<std::vector<double>> cols;
  while (std::getline(f, line)) {
    ++lineno;
    if (line.empty() || line[0] == '#') continue;
    std::vector<std::string> cells;
    std::stringstream ss(line);
    std::string c;
    while (std::getline(ss, c, ',')) cells.push_back(c);
    if (header.empty()) {
      header = cells;
      cols.assign(header.size(), {});
      continue;
    }
    if (cells.size() != header.size())
      throw InputError(SourceLocation{path, lineno, 0, ""}, "expected " + std::to_string(header.size()) + " columns");
    for (std::size_t i = 0; i < cells.size(); ++i) {
      try {
        std::size_t used = 0;
        const double v = std::stod(cells[i], &used);
        if (used != cells[i].size() || !std::isfinite(v)) throw std::invalid_argument("bad");
        cols[i].push_back(v);
      } catch (const std::exception&) {
        throw InputError(SourceLocation{path, lineno, 0, header[i]}, "not a finite number: '" + detail::printable(cells[i]) + "'");
      }
    }
  }
  auto column = [&](const std::string& name) {
    for (std::size_t i = 0; i < header.size(); ++i)
      if (header[i] == name) return Eigen::Map<const Eigen::VectorXd>(cols[i].data(), static_cast<Eigen::Index>(cols[i].size())).eval();
    throw InputError(SourceLocation{path, 0, 0, name}, "column missing from the density file");
  };
  e.x = column("x_bohr");
  e.density = column("n_per_bohr");
  e.weight = column("quadrature_weight");
  e.v_ext = column("v_ext_hartree");
  e.v_s = column("v_s_hartree");
  e.v_hxc = column("v_hxc_hartree");
  e.v_xc = column("v_xc_hartree");
  const Eigen::VectorXd t = column("trusted");
  e.trusted.resize(t.size());
  for (int i = 0; i < t.size(); ++i) e.trusted[i] = t(i) != 0.0;
}

}  // namespace

ExactManifest read_exact_manifest(const std::string& path_in) {
  fs::path path(path_in);
  std::error_code ec;
  if (fs::is_directory(path, ec)) path /= "manifest.toml";
  const std::string file = path.string();
  toml::table root;
  try {
    root = toml::parse_file(file);
  } catch (const toml::parse_error& e) {
    const auto& s = e.source();
    throw InputError(SourceLocation{file, static_cast<int>(s.begin.line), static_cast<int>(s.begin.column), ""},
                     "TOML syntax error: " + std::string(e.description()));
  }
  if (root["format"].value<std::string>().value_or("") != "stillpoint-exact-manifest")
    throw InputError(SourceLocation{file, 1, 0, "format"}, "not a stillpoint exact manifest (format = \"stillpoint-exact-manifest\" expected)");
  if (root["version"].value<int64_t>().value_or(0) != 1)
    throw InputError(SourceLocation{file, 1, 0, "version"}, "unsupported manifest version (this program reads version 1)");
  ExactManifest m;
  m.file = file;
  const toml::array* entries = root.get("entry") ? root.get("entry")->as_array() : nullptr;
  if (!entries) throw InputError(SourceLocation{file, 1, 0, "entry"}, "the manifest has no [[entry]]");
  int i = 0;
  for (const auto& en : *entries) {
    const std::string p = "entry[" + std::to_string(i++) + "]";
    const toml::table* t = en.as_table();
    if (!t) throw InputError(at(file, en, p), "expected a table");
    ExactManifestEntry e;
    e.name = required<std::string>(file, *t, p, "name");
    e.electrons = static_cast<int>(required<int64_t>(file, *t, p, "electrons"));
    e.energy = required<double>(file, *t, p, "energy");
    e.homo = required<double>(file, *t, p, "homo");
    e.density_file = required<std::string>(file, *t, p, "density_file");
    if (const toml::node* bv = t->get("batch_value")) e.batch_value = bv->value<double>();
    const toml::node* sn = t->get("system");
    if (!sn || !sn->as_table()) throw InputError(at(file, *t, p + ".system"), "each entry needs a [entry.system] table");
    toml::table one;
    toml::array arr;
    arr.push_back(*sn->as_table());
    one.insert("system", std::move(arr));
    e.system = detail::parse_solve_root(one, file, {}).systems.front();
    fs::path df(e.density_file);
    if (df.is_relative()) df = path.parent_path() / df;
    read_density_file(df.string(), e);
    m.entries.push_back(std::move(e));
  }
  return m;
}

}  // namespace stillpoint
