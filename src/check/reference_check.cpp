#include "stillpoint/check/reference_check.hpp"
#include "common/toml_input.hpp"
#include "parallel/distribute.hpp"

#include <algorithm>
#include <cctype>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>
#include <tuple>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/grid_presets.hpp"

namespace stillpoint {

namespace {

std::vector<std::string> split_csv(const std::string& line) {
  std::vector<std::string> out;
  std::string cur;
  for (char ch : line) {
    if (ch == ',') {
      out.push_back(cur);
      cur.clear();
    } else if (ch != '\r') {
      cur += ch;
    }
  }
  out.push_back(cur);
  for (auto& s : out) {
    const auto b = s.find_first_not_of(" \t"), e = s.find_last_not_of(" \t");
    s = b == std::string::npos ? std::string() : s.substr(b, e - b + 1);
  }
  return out;
}

int column_of(const std::string& line, std::size_t field) {
  std::size_t col = 1, f = 0;
  for (char ch : line) {
    if (f == field) return static_cast<int>(col);
    if (ch == ',') ++f;
    ++col;
  }
  return static_cast<int>(col);
}

}  // namespace

namespace {

const char* kQuantityHelp = "valid: Etot, Ekin, Ecoul, Eenuc, Exc, eps_<n><l> (LDA) or eps_<n><l>_up / eps_<n><l>_down (LSD)";

// Checks a quantity name against the approximation and the configuration, so that a table
// with a typo fails before any SCF runs. Returns an empty string when it is valid.
std::string quantity_problem(const std::string& q, bool lsd, const std::vector<Subshell>& shells) {
  static const std::vector<std::string> energies = {"Etot", "Ekin", "Ecoul", "Eenuc", "Exc"};
  if (std::find(energies.begin(), energies.end(), q) != energies.end()) return {};
  if (q.rfind("eps_", 0) != 0) {
    const std::string near = nearest_word(q, energies);
    return "unknown quantity '" + q + "'" + (near.empty() ? "" : "; did you mean '" + near + "'?") + " (" + kQuantityHelp + ")";
  }
  std::string label = q.substr(4);
  const bool up = label.size() > 3 && label.compare(label.size() - 3, 3, "_up") == 0;
  const bool down = label.size() > 5 && label.compare(label.size() - 5, 5, "_down") == 0;
  if (lsd && !up && !down)
    return "LSD eigenvalues need a spin suffix: " + q + "_down (majority spin) or " + q + "_up (minority spin)";
  if (!lsd && (up || down)) return "LDA (spin-unpolarized) eigenvalues have no spin suffix: write eps_<n><l>";
  if (up) label.resize(label.size() - 3);
  if (down) label.resize(label.size() - 5);
  static const std::string letters = "spdfg";
  std::size_t used = 0;
  while (used < label.size() && std::isdigit(static_cast<unsigned char>(label[used]))) ++used;
  if (used == 0 || used + 1 != label.size() || letters.find(label[used]) == std::string::npos)
    return "cannot read the level in '" + q + "' (" + kQuantityHelp + ")";
  const int n = std::stoi(label.substr(0, used));
  const int l = static_cast<int>(letters.find(label[used]));
  if (n <= l) return "level " + label + " does not exist (l must be smaller than n)";
  // The solver computes, for every l of the configuration, the levels up to the largest listed n.
  for (const Subshell& sh : shells)
    if (sh.l == l && sh.n >= n) return {};
  return "level " + label + " is not part of the configuration, so it is not computed";
}

}  // namespace

std::vector<ReferenceRow> read_reference_table(const std::string& path) {
  std::istringstream in = detail::open_table(path, "cannot open reference table");
  static const std::vector<std::string> header = {"Z", "symbol", "charge", "configuration", "approximation", "quantity", "value"};
  std::vector<ReferenceRow> rows;
  std::map<std::tuple<int, int, std::string, std::string>, int> seen;         // (Z, charge, appr, quantity) -> line
  std::map<std::tuple<int, int, std::string>, std::pair<std::vector<Subshell>, int>> configs;  // group -> config, line
  std::string line;
  int lineno = 0;
  bool have_header = false;
  while (std::getline(in, line)) {
    ++lineno;
    const auto first = line.find_first_not_of(" \t\r");
    if (first == std::string::npos || line[first] == '#') continue;
    const auto f = split_csv(line);
    if (!have_header) {
      if (f != header) {
        std::string expect;
        for (const auto& h : header) expect += (expect.empty() ? "" : ",") + h;
        std::size_t i = 0;
        while (i < f.size() && i < header.size() && f[i] == header[i]) ++i;
        const std::string found = i < f.size() ? "'" + detail::printable(f[i]) + "'" : "nothing";
        const std::string wanted = i < header.size() ? "'" + header[i] + "'" : "the end of the line";
        throw InputError(SourceLocation{path, lineno, column_of(line, i), "header"},
                         "expected the header line '" + expect + "'; field " + std::to_string(i + 1) + " holds " +
                             found + " where " + wanted + " belongs");
      }
      have_header = true;
      continue;
    }
    if (f.size() != header.size())
      throw InputError(SourceLocation{path, lineno, 1, ""},
                       "expected 7 comma-separated fields (Z,symbol,charge,configuration,approximation,quantity,value), found " +
                           std::to_string(f.size()));
    ReferenceRow r;
    r.file = path;
    r.line = lineno;
    auto where = [&](std::size_t i) { return SourceLocation{path, lineno, column_of(line, i), header[i]}; };
    auto number = [&](std::size_t i) {
      try {
        std::size_t used = 0;
        const double v = std::stod(f[i], &used);
        if (used != f[i].size() || !std::isfinite(v)) throw std::invalid_argument(header[i]);
        return v;
      } catch (const std::exception&) {
        throw InputError(where(i), "'" + detail::printable(f[i]) + "' is not a number");
      }
    };
    const double z = number(0);
    const double q = number(2);
    if (z != std::round(z) || z < 1 || z > 118) throw InputError(where(0), "Z must be an integer 1..118");
    if (q != std::round(q)) throw InputError(where(2), "charge must be an integer");
    r.Z = static_cast<int>(z);
    r.charge = static_cast<int>(q);
    if (r.charge >= r.Z) throw InputError(where(2), "charge must be smaller than Z (no electrons left)");
    r.symbol = f[1];
    if (element_symbol(r.Z) != r.symbol)
      throw InputError(where(1), "symbol '" + r.symbol + "' does not match Z = " + std::to_string(r.Z) + " (" +
                                     element_symbol(r.Z) + ")");
    r.configuration = f[3];
    r.approximation = f[4];
    if (r.approximation != "LDA" && r.approximation != "LSD")
      throw InputError(where(4), "approximation must be LDA (spin-unpolarized) or LSD (spin-polarized), not '" +
                                     r.approximation + "'");
    r.quantity = f[5];
    r.value = number(6);
    // Validate the configuration now so that errors point at the table line.
    const std::vector<Subshell> shells = parse_configuration(r.configuration, where(3));
    const double ne = electron_count(shells);
    if (std::abs(ne - (r.Z - r.charge)) > 1e-9) {
      std::ostringstream m;
      m << "the configuration holds " << ne << " electrons but Z - charge = " << r.Z - r.charge;
      throw InputError(where(3), m.str());
    }
    const auto group = std::make_tuple(r.Z, r.charge, r.approximation);
    if (const auto [it, fresh] = configs.emplace(group, std::make_pair(shells, lineno)); !fresh && it->second.first != shells)
      throw InputError(where(3), "configuration differs from line " + std::to_string(it->second.second) +
                                     " of the same atom, charge and approximation");
    if (const std::string problem = quantity_problem(r.quantity, r.approximation == "LSD", shells); !problem.empty())
      throw InputError(where(5), problem);
    if (const auto [it, fresh] = seen.emplace(std::make_tuple(r.Z, r.charge, r.approximation, r.quantity), lineno); !fresh)
      throw InputError(where(5), "duplicate of line " + std::to_string(it->second) + " (same Z, charge, approximation and quantity)");
    rows.push_back(r);
  }
  if (!have_header) throw InputError(SourceLocation{path, 0, 0, ""}, "the table is empty (no header line)");
  return rows;
}

namespace {

// The value of one table row in a converged solution. An unknown quantity or level is an
// input error naming the row.
double computed_value(const ReferenceRow& row, const ReferenceRow& first, bool polarized, const KsSolution& S) {
  const ReferenceRow* r = &row;
  double computed = std::numeric_limits<double>::quiet_NaN();
  const std::string& q = r->quantity;
  if (q == "Etot")
    computed = S.energy.total;
  else if (q == "Ekin")
    computed = S.energy.kinetic;
  else if (q == "Ecoul")
    computed = S.energy.hartree;
  else if (q == "Eenuc")
    computed = S.energy.external;
  else if (q == "Exc")
    computed = S.energy.xc;
  else if (q.rfind("eps_", 0) == 0) {
    std::string label = q.substr(4);
    int spin = 0;
    if (polarized) {
      if (label.size() > 5 && label.substr(label.size() - 5) == "_down") {
        spin = 0;  // NIST SRD 141: "down" is the majority spin, our channel 0
        label.resize(label.size() - 5);
      } else if (label.size() > 3 && label.substr(label.size() - 3) == "_up") {
        spin = 1;
        label.resize(label.size() - 3);
      } else {
        throw InputError(SourceLocation{r->file, r->line, 0, "quantity"},
                         "LSD eigenvalues need a spin suffix: " + q + "_up or " + q + "_down");
      }
    }
    for (const Level& lv : S.levels)
      if (lv.label == label && lv.spin == spin) computed = lv.energy;
    if (std::isnan(computed))
      throw InputError(SourceLocation{r->file, r->line, 0, "quantity"},
                       "no level '" + label + "' in configuration " + first.configuration);
  } else {
    throw InputError(SourceLocation{r->file, r->line, 0, "quantity"},
                     "unknown quantity '" + q + "' (valid: Etot, Ekin, Ecoul, Eenuc, Exc, eps_<nl>[_up|_down])");
  }
  return computed;
}

}  // namespace

CheckReport run_reference_check(const std::vector<ReferenceRow>& rows, const CheckOptions& opt) {
  const auto t0 = std::chrono::steady_clock::now();
  using Key = std::tuple<int, int, std::string>;
  std::map<Key, std::vector<const ReferenceRow*>> groups;
  std::vector<Key> order;
  for (const auto& r : rows) {
    Key k{r.Z, r.charge, r.approximation};
    if (!groups.count(k)) order.push_back(k);
    groups[k].push_back(&r);
  }
  CheckReport rep;
  for (const Key& k : order) {
    const auto& g = groups[k];
    for (const ReferenceRow* r : g)
      if (parse_configuration(r->configuration) != parse_configuration(g.front()->configuration))
        throw InputError(SourceLocation{r->file, r->line, 0, "configuration"},
                         "configuration differs from line " + std::to_string(g.front()->line) + " of the same atom and approximation");
  }
  // One SCF per (atom, charge, approximation); under MPI the atoms are shared out over the ranks
  // and their computed values sent to all, so every rank builds the same report.
  const int ng = static_cast<int>(order.size());
  std::vector<std::vector<double>> computed(order.size());
  std::vector<int> iterations(order.size(), 0);
  std::vector<double> cost(order.size());
  for (int i = 0; i < ng; ++i) cost[i] = std::pow(std::get<0>(order[i]), 1.5);  // until measured: grows with Z
  const Communicator& comm = opt.communicator ? *opt.communicator : serial_communicator();
  const auto errors = detail::distributed_for(
      comm, ng, 1, cost,
      [&](int i) {
        const auto& g = groups[order[i]];
        const ReferenceRow& first = *g.front();
        SystemSpec s;
        s.name = first.symbol;  // built with append: GCC 12 warns falsely (-Wrestrict) on operator+
        if (first.charge) s.name.append("+").append(std::to_string(first.charge));
        s.name.append("_").append(first.approximation);
        s.geometry = Geometry::Radial;
        s.atom.Z = first.Z;
        s.charge = first.charge;
        s.atom.configuration = parse_configuration(first.configuration);
        s.spin_polarized = first.approximation == "LSD";
        s.xc = {"lda_x", "lda_c_vwn"};
        s.grid = grid_preset(Geometry::Radial, opt.grid);
        s.grid_name = opt.grid;
        KsProblem P(s);
        const KsSolution S = solve_scf(P, opt.scf);
        iterations[i] = S.iterations;
        for (const ReferenceRow* r : g) computed[i].push_back(computed_value(*r, first, s.spin_polarized, S));
        if (opt.progress) {
          char buf[160];
          std::snprintf(buf, sizeof buf, "%s Z=%d charge=%d %s: %zu values, SCF %d iterations", first.symbol.c_str(), first.Z,
                        first.charge, first.approximation.c_str(), g.size(), S.iterations);
          opt.progress(buf);
        }
      },
      [&](int i) {
        detail::ByteWriter w;
        w.i64(iterations[i]);
        w.u64(computed[i].size());
        for (double v : computed[i]) w.f64(v);
        return w.take();
      },
      [&](int i, const std::string& bytes) {
        detail::ByteReader r = detail::message_reader(bytes);
        iterations[i] = static_cast<int>(r.i64());
        computed[i].resize(r.count(8));
        for (double& v : computed[i]) v = r.f64();
      },
      /*stop_at_first_error=*/true);
  // The first failing atom in table order, as a serial run that stops there would report it.
  for (const auto& e : errors)
    if (e) std::rethrow_exception(e);
  for (int i = 0; i < ng; ++i) {
    const auto& g = groups[order[i]];
    for (std::size_t j = 0; j < g.size(); ++j) {
      CheckResult cr;
      cr.row = *g[j];
      cr.computed = computed[i][j];
      cr.deviation = cr.computed - g[j]->value;
      cr.passed = std::abs(cr.deviation) <= opt.tolerance;
      rep.n_checked++;
      if (!cr.passed) rep.n_failed++;
      rep.max_abs_deviation = std::max(rep.max_abs_deviation, std::abs(cr.deviation));
      rep.results.push_back(cr);
    }
  }
  rep.seconds = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  return rep;
}

std::string format_check_table(const CheckReport& rep, double tol) {
  std::ostringstream o;
  char buf[256];
  std::snprintf(buf, sizeof buf, "%-4s %3s %6s %-4s %-14s %16s %16s %11s  %s\n", "atom", "Z", "charge", "appr", "quantity",
                "reference/Ha", "computed/Ha", "deviation", "status");
  o << buf;
  for (const auto& r : rep.results) {
    std::snprintf(buf, sizeof buf, "%-4s %3d %6d %-4s %-14s %16.6f %16.9f %11.2e  %s\n", r.row.symbol.c_str(), r.row.Z,
                  r.row.charge, r.row.approximation.c_str(), r.row.quantity.c_str(), r.row.value, r.computed, r.deviation,
                  r.passed ? "ok" : "FAIL");
    o << buf;
  }
  std::snprintf(buf, sizeof buf, "%s: %d of %d values within %.1e Ha (max |deviation| %.2e Ha, %.2f s)\n",
                rep.n_failed == 0 ? "PASS" : "FAIL", rep.n_checked - rep.n_failed, rep.n_checked, tol,
                rep.max_abs_deviation, rep.seconds);
  o << buf;
  return o.str();
}

std::string check_report_json(const CheckReport& rep, double tol) {
  nlohmann::json j;
  j["units"] = "hartree";
  j["tolerance"] = tol;
  nlohmann::json arr = nlohmann::json::array();
  for (const auto& r : rep.results)
    arr.push_back({{"Z", r.row.Z},
                   {"symbol", r.row.symbol},
                   {"charge", r.row.charge},
                   {"configuration", r.row.configuration},
                   {"approximation", r.row.approximation},
                   {"quantity", r.row.quantity},
                   {"reference", r.row.value},
                   {"computed", r.computed},
                   {"deviation", r.deviation},
                   {"passed", r.passed}});
  j["results"] = arr;
  j["summary"] = {{"n_checked", rep.n_checked},
                  {"n_failed", rep.n_failed},
                  {"n_passed", rep.n_checked - rep.n_failed},
                  {"max_abs_deviation", rep.max_abs_deviation},
                  {"passed", rep.n_failed == 0},
                  {"seconds", rep.seconds}};
  return j.dump(2) + "\n";
}

std::string check_report_junit(const CheckReport& rep, double tol) {
  auto esc = [](const std::string& s) {
    std::string o;
    for (char c : s) {
      switch (c) {
        case '<': o += "&lt;"; break;
        case '>': o += "&gt;"; break;
        case '&': o += "&amp;"; break;
        case '"': o += "&quot;"; break;
        case '\'': o += "&apos;"; break;
        default: o += c;
      }
    }
    return o;
  };
  std::ostringstream o;
  char buf[512];
  o << "<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n";
  std::snprintf(buf, sizeof buf,
                "<testsuites name=\"stillpoint check\" tests=\"%d\" failures=\"%d\" errors=\"0\" time=\"%.3f\">\n"
                "<testsuite name=\"stillpoint-check\" tests=\"%d\" failures=\"%d\" errors=\"0\" skipped=\"0\" time=\"%.3f\">\n",
                rep.n_checked, rep.n_failed, rep.seconds, rep.n_checked, rep.n_failed, rep.seconds);
  o << buf;
  for (const auto& r : rep.results) {
    // Built with append: GCC 12 warns falsely (-Wrestrict) on operator+ chains here.
    std::string cls = r.row.symbol;
    if (r.row.charge) cls.append(r.row.charge > 0 ? "+" : "").append(std::to_string(r.row.charge));
    cls.append(".").append(r.row.approximation);
    o << "  <testcase classname=\"" << esc(cls) << "\" name=\"" << esc(r.row.quantity) << "\"";
    if (r.passed) {
      o << "/>\n";
    } else {
      std::snprintf(buf, sizeof buf, "reference %.9f Ha, computed %.9f Ha, deviation %.3e Ha exceeds %.1e Ha", r.row.value,
                    r.computed, r.deviation, tol);
      o << "><failure message=\"" << esc(buf) << "\"/></testcase>\n";
    }
  }
  o << "</testsuite>\n</testsuites>\n";
  return o.str();
}

}  // namespace stillpoint
