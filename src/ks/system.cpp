#include "stillpoint/ks/system.hpp"

namespace stillpoint {

double SystemSpec::electron_count() const {
  if (geometry == Geometry::Radial) return atom.Z - charge;
  double z = 0.0;
  for (const auto& nuc : line.nuclei) z += nuc.charge;
  return z - charge;
}

Mesh mesh_of(const SystemSpec& s) {
  return s.geometry == Geometry::Radial ? Mesh::radial(s.grid, s.atom.Z) : Mesh::line(s.grid);
}

}  // namespace stillpoint
