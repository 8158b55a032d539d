#include "stillpoint/ks/external_potential.hpp"

#include <algorithm>
#include <cmath>
#include <fstream>
#include <sstream>

#include "common/toml_input.hpp"
#include "numerics/interpolation.hpp"
#include "stillpoint/common/errors.hpp"

namespace stillpoint {

namespace {
// Bounds on table values (docs/input.md): beyond them the spline and the eigensolver only
// produce overflow, and no physical model potential comes near.
constexpr double kMaxTablePotential = 1e8;
constexpr double kMaxTablePosition = 1e6;
}  // namespace

double ExternalTerm::value(double x) const {
  switch (kind) {
    case Kind::Harmonic:
      return 0.5 * omega * omega * (x - center) * (x - center);
    case Kind::Gaussian:
      return -depth * std::exp(-(x - center) * (x - center) / (2.0 * width * width));
    case Kind::Table: {
      // Outside the table the end values are held: a table must cover the region that matters.
      if (x <= table_x.front()) return table_v.front();
      if (x >= table_x.back()) return table_v.back();
      const std::vector<double>& m = table_m;
      const auto it = std::upper_bound(table_x.begin(), table_x.end(), x);
      const std::size_t hi = static_cast<std::size_t>(it - table_x.begin()), lo = hi - 1;
      const double h = table_x[hi] - table_x[lo];
      const double a = (table_x[hi] - x) / h, b = (x - table_x[lo]) / h;
      return a * table_v[lo] + b * table_v[hi] + ((a * a * a - a) * m[lo] + (b * b * b - b) * m[hi]) * h * h / 6.0;
    }
  }
  return 0.0;
}

ExternalTerm read_potential_table(const std::string& path) {
  SourceLocation where{path, 0, 0, ""};
  std::istringstream in = detail::open_table(path, "cannot open potential table");
  ExternalTerm t;
  t.kind = ExternalTerm::Kind::Table;
  t.source = path;
  std::string line;
  int lineno = 0;
  while (std::getline(in, line)) {
    ++lineno;
    where.line = lineno;
    const auto first = line.find_first_not_of(" \t\r");
    if (first == std::string::npos || line[first] == '#') continue;
    std::replace(line.begin(), line.end(), ',', ' ');
    std::istringstream ss(line);
    double x, v;
    if (!(ss >> x >> v)) {
      if (t.table_x.empty() && std::isalpha(static_cast<unsigned char>(line[first]))) continue;  // header
      throw InputError(where, "expected two numbers (x in bohr, v in hartree)");
    }
    std::string extra;
    if (ss >> extra)
      throw InputError(where, "expected two columns (x in bohr, v in hartree) but the row has more ('" +
                                  detail::printable(extra, 20) + "')");
    if (!std::isfinite(x) || !std::isfinite(v)) throw InputError(where, "non-finite value");
    if (std::abs(x) > kMaxTablePosition || std::abs(v) > kMaxTablePotential)
      throw InputError(where, std::abs(x) > kMaxTablePosition
                                  ? "|x| = " + detail::format_number(std::abs(x), 4) + " bohr is beyond the limit of " +
                                        detail::format_number(kMaxTablePosition, 4) + " bohr"
                                  : "|v| = " + detail::format_number(std::abs(v), 4) + " hartree is beyond the limit of " +
                                        detail::format_number(kMaxTablePotential, 4) + " hartree");
    if (!t.table_x.empty() && x <= t.table_x.back()) throw InputError(where, "x values must be strictly ascending");
    t.table_x.push_back(x);
    t.table_v.push_back(v);
  }
  if (t.table_x.size() < 2) throw InputError(SourceLocation{path, 0, 0, ""}, "a potential table needs at least two rows");
  t.table_m = detail::NaturalSpline(t.table_x, t.table_v).second_derivatives();
  return t;
}

}  // namespace stillpoint
