#include "stillpoint/ks/system.hpp"

namespace stillpoint {

double SystemSpec::electron_count() const {
  if (geometry == Geometry::Radial) return atom.Z - charge;
  double z = 0.0;
  for (const auto& nuc : line.nuclei) z += nuc.charge;
  return z - charge;
}

}  // namespace stillpoint
