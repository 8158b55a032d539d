// Target densities of an inversion: reading a density table (any positions, one column per
// spin or the total), putting it on the mesh, normalizing it to the occupations, and marking
// where it can be trusted. Shared by both methods (wu_yang.cpp, direct.cpp).
#include "common/format.hpp"
#include "stillpoint/invert/inversion.hpp"
#include "common/toml_input.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <sstream>

#include "stillpoint/ks/problem.hpp"
#include "numerics/interpolation.hpp"

namespace stillpoint {

// ---------------------------------------------------------------------------------------------
// Target densities
// ---------------------------------------------------------------------------------------------

namespace {

std::string trim(const std::string& s) {
  const auto a = s.find_first_not_of(" \t\r\n");
  if (a == std::string::npos) return "";
  const auto b = s.find_last_not_of(" \t\r\n");
  return s.substr(a, b - a + 1);
}

std::vector<std::string> split_fields(const std::string& line) {
  std::vector<std::string> out;
  std::string cur;
  bool any_comma = line.find(',') != std::string::npos;
  for (char ch : line) {
    const bool sep = any_comma ? ch == ',' : (ch == ' ' || ch == '\t');
    if (sep) {
      if (any_comma || !cur.empty()) out.push_back(trim(cur));
      cur.clear();
    } else {
      cur += ch;
    }
  }
  if (any_comma || !trim(cur).empty()) out.push_back(trim(cur));
  return out;
}

bool parse_number(const std::string& s, double& v) {
  if (s.empty()) return false;
  char* end = nullptr;
  v = std::strtod(s.c_str(), &end);
  return end && *end == '\0';
}

std::string lower(std::string s) {
  for (char& c : s) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  return s;
}


std::string fmt(const char* f, double v) { return detail::printf_number(f, v); }

}  // namespace

std::vector<double> electrons_per_spin(const SystemSpec& system) {
  SystemSpec s = system;
  s.xc.clear();
  s.xc_weights.clear();
  s.xc_parameters.clear();
  const KsProblem P(s);
  std::vector<double> e(P.nspin());
  for (int s = 0; s < P.nspin(); ++s) e[s] = P.spin_electrons(s);
  return e;
}

TargetDensity target_on_mesh(const std::vector<double>& x, const std::vector<std::vector<double>>& n, const Mesh& mesh,
                             const std::vector<double>& electrons, const std::string& source, const SourceLocation& where) {
  TargetDensity t;
  t.source = source;
  const int N = mesh.num_nodes();
  const int ns = static_cast<int>(n.size());
  const bool radial = mesh.geometry() == Geometry::Radial;
  const Eigen::VectorXd& X = mesh.x();
  const Eigen::VectorXd& W = mesh.density_weight();
  if (x.size() < 2) throw InputError(where, source + ": a density table needs at least two rows");
  // Tables that did not come through the file reader (arrays from Python) get its checks here.
  for (std::size_t j = 0; j < x.size(); ++j) {
    if (!std::isfinite(x[j]))
      throw InputError(where, source + ": row " + std::to_string(j + 1) + ": the position is not a finite number");
    if (j > 0 && !(x[j] > x[j - 1]))
      throw InputError(where, source + ": row " + std::to_string(j + 1) + ": positions must increase strictly");
    for (int s = 0; s < static_cast<int>(n.size()); ++s) {
      if (n[s].size() != x.size())
        throw InputError(where, source + ": density column " + std::to_string(s + 1) + " has " +
                                    std::to_string(n[s].size()) + " values for " + std::to_string(x.size()) + " positions");
      if (!std::isfinite(n[s][j]) || n[s][j] < 0.0)
        throw InputError(where, source + ": row " + std::to_string(j + 1) + ": the density " +
                                    (std::isfinite(n[s][j]) ? "is negative" : "is not a finite number") +
                                    "; densities must be finite and non-negative");
    }
  }
  // Exact node match: every interior node (and radially every node but r = 0) is a table row.
  std::vector<int> match(N, -1);
  bool exact = true;
  {
    std::size_t j = 0;
    for (int k = 0; k < N; ++k) {
      const double tol = 1e-9 * std::max(1.0, std::abs(X(k)));
      while (j < x.size() && x[j] < X(k) - tol) ++j;
      if (j < x.size() && std::abs(x[j] - X(k)) <= tol) match[k] = static_cast<int>(j);
      const bool needed = !(radial && k == 0) && k != N - 1 && !(k == 0 && !radial);
      if (needed && match[k] < 0) exact = false;
    }
  }
  t.exact_nodes = exact;
  t.covered.assign(N, true);
  t.density.assign(ns, Eigen::VectorXd::Zero(N));
  const double x0 = x.front(), x1 = x.back();
  int below = 0, above = 0;
  bool used_log = true;
  for (int s = 0; s < ns; ++s) {
    // Strictly positive tables: cubic spline of log n. Otherwise (zeros in the table): monotone
    // cubic Hermite of n itself.
    const bool positive = std::all_of(n[s].begin(), n[s].end(), [](double v) { return v > 0; });
    used_log = used_log && positive;
    std::vector<double> logn;
    if (positive)
      for (double v : n[s]) logn.push_back(std::log(v));
    const detail::MonotoneCubic hermite(x, n[s]);
    const detail::NaturalSpline spline(x, positive ? logn : n[s]);
    auto interp = [&](double xv) { return positive ? std::exp(spline(xv)) : hermite(xv); };
    for (int k = 0; k < N; ++k) {
      const double xk = X(k);
      double value;
      if (exact && match[k] >= 0) {
        value = n[s][match[k]];
      } else if (xk >= x0 && xk <= x1) {
        value = interp(xk);
      } else {
        const bool low = xk < x0;
        if (s == 0 && !(radial && k == 0)) (low ? below : above)++;
        if (!(radial && k == 0)) t.covered[k] = false;
        // Exponential continuation of the two end rows (decay only); radially below the first
        // row the density is finite, so its value is held.
        const std::size_t a = low ? 0 : x.size() - 1, b = low ? 1 : x.size() - 2;
        const double ya = n[s][a], yb = n[s][b];
        if (radial && low) {
          value = ya;
        } else if (ya > 0 && yb > ya) {
          const double rate = std::log(yb / ya) / std::abs(x[b] - x[a]);
          value = ya * std::exp(-rate * std::abs(xk - x[a]));
        } else {
          value = ya;
        }
      }
      t.density[s](k) = std::max(0.0, value);
    }
    // Dirichlet ends carry no orbital: no density there.
    t.density[s](N - 1) = 0.0;
    if (!radial) t.density[s](0) = 0.0;
  }
  if (below + above > 0) {
    std::ostringstream w;
    w << source << ": the table covers " << (radial ? "r" : "x") << " in [" << x0 << ", " << x1 << "] bohr but the grid spans ["
      << X(0) << ", " << X(N - 1) << "] bohr; " << below + above
      << " node(s) outside were filled by exponential continuation of the end rows and are never flagged trustworthy";
    t.warnings.push_back(w.str());
  }
  if (!exact)
    t.warnings.push_back(source + ": positions are not the grid nodes; the density was interpolated (" +
                         (used_log ? std::string("cubic spline of log n") : std::string("monotone cubic Hermite")) + ")");
  t.electrons_in_table = 0.0;
  for (int s = 0; s < ns; ++s) {
    const double got = W.dot(t.density[s]);
    t.electrons_in_table += got;
    const double want = electrons[s];
    if (!(got > 0)) throw InputError(where, source + ": the target density integrates to zero on the grid");
    if (std::abs(got - want) > 0.02 * want) {
      std::ostringstream m;
      m << source << ": the target density holds " << got << " electrons" << (ns == 2 ? (s == 0 ? " (spin up)" : " (spin down)") : "")
        << " on this grid but the system has " << want;
      if (radial) {
        double radial_integral = 0.0;  // ∫ n dr: a file holding 4πr²n instead of n?
        for (int k = 0; k < N; ++k) radial_integral += mesh.w()(k) * t.density[s](k);
        if (std::abs(radial_integral - want) < 0.02 * want)
          m << "; the column looks like the radial distribution 4 pi r^2 n, but n itself (per bohr^3) is expected";
      }
      m << "; check the system's charge and the file's units";
      throw InputError(where, m.str());
    }
    t.scale = want / got;
    t.density[s] *= t.scale;
    if (std::abs(t.scale - 1.0) > 1e-8)
      t.warnings.push_back(source + ": the target held " + fmt("%.10g", got) + " electrons on the grid; scaled by " +
                           fmt("%.10g", t.scale) + " to " + fmt("%.10g", want));
  }
  return t;
}

TargetDensity read_target_density(const std::string& path, const Mesh& mesh, const std::vector<double>& electrons,
                                  const SourceLocation& where, const std::string& column) {
  std::istringstream f = detail::open_table(path, "cannot open the target density file '" + path + "'", where);
  const int ns = static_cast<int>(electrons.size());
  const bool radial = mesh.geometry() == Geometry::Radial;
  std::string line;
  int lineno = 0;
  std::vector<std::string> header;
  int xcol = 0;
  std::vector<int> ncol;
  std::vector<double> x;
  std::vector<std::vector<double>> n(ns);
  auto at = [&](int l, const std::string& msg) {
    SourceLocation s{path, l, 0, ""};
    return InputError(s, msg + " (target file named by " + where.describe() + ")");
  };
  bool columns_known = false;
  auto choose_columns = [&](int width, int l) {
    if (header.empty()) {
      xcol = 0;
      ncol.clear();
      for (int s = 0; s < ns; ++s) ncol.push_back(1 + s);
      if (width < 1 + ns)
        throw at(l, "expected " + std::to_string(1 + ns) + " columns (position" + (ns == 2 ? ", n_up, n_down)" : ", density)"));
      return;
    }
    std::vector<std::string> h;
    for (const auto& s : header) h.push_back(lower(s));
    xcol = 0;
    for (const char* name : {"x_bohr", "r_bohr", "x", "r"}) {
      auto it = std::find(h.begin(), h.end(), name);
      if (it != h.end()) {
        xcol = static_cast<int>(it - h.begin());
        break;
      }
    }
    const std::string xname = h[xcol];
    if (radial && (xname == "x_bohr" || xname == "x"))
      throw at(l, "the table holds a line density (column '" + header[xcol] + "') but the system is an atom");
    if (!radial && (xname == "r_bohr" || xname == "r"))
      throw at(l, "the table holds a radial density (column '" + header[xcol] + "') but the system is a line system");
    ncol.clear();
    auto find_name = [&](const std::string& want) -> int {
      for (std::size_t i = 0; i < h.size(); ++i)
        if (h[i] == lower(want)) return static_cast<int>(i);
      return -1;
    };
    if (!column.empty()) {
      if (ns == 2) throw at(l, "invert.column names one density column; a spin-polarized target needs n_up and n_down columns");
      const int c = find_name(column);
      if (c < 0) {
        const std::string near = nearest_word(column, header);
        throw at(l, "no column named '" + column + "'" + (near.empty() ? "" : "; did you mean '" + near + "'?"));
      }
      ncol.push_back(c);
    } else if (ns == 1) {
      int c = -1;
      for (const char* name : {"n_per_bohr", "n_per_bohr3", "n", "density"})
        if ((c = find_name(name)) >= 0) break;
      if (c < 0)
        for (std::size_t i = 0; i < h.size(); ++i)
          if (static_cast<int>(i) != xcol && !h[i].empty() && h[i][0] == 'n' && h[i].rfind("n_up", 0) != 0 &&
              h[i].rfind("n_down", 0) != 0) {
            c = static_cast<int>(i);
            break;
          }
      if (c < 0) throw at(l, "no density column found (expected n_per_bohr, n_per_bohr3, n or density; or set invert.column)");
      ncol.push_back(c);
    } else {
      for (const char* prefix : {"n_up", "n_down"}) {
        int c = -1;
        for (std::size_t i = 0; i < h.size(); ++i)
          if (h[i].rfind(prefix, 0) == 0) {
            c = static_cast<int>(i);
            break;
          }
        if (c < 0) throw at(l, std::string("a spin-polarized system needs a column starting with '") + prefix + "'");
        ncol.push_back(c);
      }
    }
    if (radial && (h[ncol[0]] == "n_per_bohr" || h[ncol[0]].find("per_bohr3") == std::string::npos) &&
        h[ncol[0]].find("per_bohr") != std::string::npos)
      throw at(l, "column '" + header[ncol[0]] + "' is a line density (per bohr) but the system is an atom (per bohr^3)");
    if (!radial && h[ncol[0]].find("per_bohr3") != std::string::npos)
      throw at(l, "column '" + header[ncol[0]] + "' is a density per bohr^3 but the system is a line system (per bohr)");
  };
  while (std::getline(f, line)) {
    ++lineno;
    const std::string tl = trim(line);
    if (tl.empty() || tl[0] == '#') continue;
    const std::vector<std::string> fields = split_fields(tl);
    double first;
    if (!columns_known && !parse_number(fields[0], first)) {
      header = fields;
      choose_columns(static_cast<int>(fields.size()), lineno);
      columns_known = true;
      continue;
    }
    if (!columns_known) {
      choose_columns(static_cast<int>(fields.size()), lineno);
      columns_known = true;
    }
    double xv;
    const int need = std::max(xcol, *std::max_element(ncol.begin(), ncol.end())) + 1;
    if (static_cast<int>(fields.size()) < need)
      throw at(lineno, "expected at least " + std::to_string(need) + " columns, found " + std::to_string(fields.size()));
    if (!parse_number(fields[xcol], xv) || !std::isfinite(xv))
      throw at(lineno, "position '" + detail::printable(fields[xcol]) + "' is not a finite number");
    if (!x.empty() && !(xv > x.back())) throw at(lineno, "positions must increase strictly from row to row");
    if (radial && xv < 0) throw at(lineno, "radial positions must be non-negative");
    x.push_back(xv);
    for (int s = 0; s < ns; ++s) {
      double nv;
      if (!parse_number(fields[ncol[s]], nv) || !std::isfinite(nv))
        throw at(lineno, "density '" + detail::printable(fields[ncol[s]]) + "' is not a finite number");
      if (nv < 0) {
        if (nv > -1e-14) nv = 0.0;  // rounding noise of a tail
        else throw at(lineno, "density " + fields[ncol[s]] + " is negative");
      }
      n[s].push_back(nv);
    }
  }
  if (x.size() < 2) throw at(lineno, "the target density file has fewer than two data rows");
  TargetDensity t = target_on_mesh(x, n, mesh, electrons, path, where);
  if (!header.empty()) {
    t.position_column = header[xcol];
    for (std::size_t i = 0; i < ncol.size(); ++i) t.density_columns += (i ? "," : "") + header[ncol[i]];
  }
  return t;
}

}  // namespace stillpoint
