#pragma once
// External potentials on the line beyond the nuclear attraction.
#include <string>
#include <vector>

namespace stillpoint {

struct ExternalTerm {
  enum class Kind {
    Harmonic,  ///< (1/2) omega^2 (x - center)^2
    Gaussian,  ///< -depth * exp(-(x - center)^2 / (2 width^2))
    Table,     ///< values on points from a file, interpolated by a natural cubic spline
  };
  Kind kind = Kind::Harmonic;
  double omega = 1.0;
  double depth = 1.0;
  double center = 0.0;
  double width = 1.0;
  std::vector<double> table_x, table_v;  ///< ascending x, bohr; v in hartree
  std::vector<double> table_m;           ///< spline second derivatives (read_potential_table fills them)
  std::string source;                    ///< file it came from (Table), for messages

  double value(double x) const;
};

/// Reads a two-column CSV (x in bohr, v in hartree; '#' comments, an optional header line).
/// Throws InputError naming file and line for malformed rows or non-ascending x.
ExternalTerm read_potential_table(const std::string& path);

}  // namespace stillpoint
