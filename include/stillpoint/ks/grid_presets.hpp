#pragma once
// Named grids from basis-data/grid-presets.toml (compiled into the library).
#include <string>
#include <vector>

#include "stillpoint/numerics/mesh.hpp"

namespace stillpoint {

/// The preset `name` ("coarse", "default", "tight") for the geometry. Throws InputError with
/// the list of valid names otherwise.
MeshSpec grid_preset(Geometry geometry, const std::string& name);
std::vector<std::string> grid_preset_names(Geometry geometry);

}  // namespace stillpoint
