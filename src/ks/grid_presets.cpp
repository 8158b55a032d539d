#include "stillpoint/ks/grid_presets.hpp"

#include <toml++/toml.h>

#include "stillpoint/common/errors.hpp"
#include "stillpoint_embedded_data.hpp"

namespace stillpoint {

namespace {
const toml::table& presets() {
  static const toml::table t = toml::parse(std::string_view{embedded::grid_presets_toml}, std::string{"grid-presets.toml"});
  return t;
}
const char* section(Geometry g) { return g == Geometry::Radial ? "atom" : "line"; }
}  // namespace

std::vector<std::string> grid_preset_names(Geometry g) {
  std::vector<std::string> names;
  if (const auto* tab = presets()[section(g)].as_table())
    for (const auto& [k, v] : *tab) names.emplace_back(k.str());
  return names;
}

MeshSpec grid_preset(Geometry g, const std::string& name) {
  const auto* tab = presets()[section(g)][name].as_table();
  if (!tab) {
    std::string list;
    for (const auto& n : grid_preset_names(g)) list += (list.empty() ? "" : ", ") + n;
    throw InputError("unknown grid preset '" + name + "' (valid: " + list + ")");
  }
  MeshSpec s;
  s.degree = (*tab)["degree"].value_or(s.degree);
  if (g == Geometry::Radial) {
    s.elements = (*tab)["elements"].value_or(s.elements);
    s.first_element = (*tab)["first_element"].value_or(s.first_element);
    s.r_max = (*tab)["r_max"].value_or(s.r_max);
  } else {
    s.element_size = (*tab)["element_size"].value_or(s.element_size);
    s.half_width = (*tab)["half_width"].value_or(s.half_width);
  }
  return s;
}

}  // namespace stillpoint
