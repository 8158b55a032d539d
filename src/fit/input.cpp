#include "stillpoint/fit/input.hpp"

#include <toml++/toml.h>

#include <algorithm>
#include <cmath>
#include <filesystem>
#include <map>

#include "response/dataset.hpp"
#include "response/input_detail.hpp"
#include "common/toml_input.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/mesh.hpp"

namespace stillpoint {

namespace {

using detail::bool_key;
using detail::finite_number;
using detail::key_location;
using detail::location;
using detail::number_key;
using detail::string_key;

// Normalization defaults (docs/fit.md, "Normalization"): an error of one scale costs one loss unit.
constexpr double kEnergyScalePerElectron = 1e-3;  // hartree per electron, total energies
constexpr double kEnergyScale = 1e-3;             // hartree, energy differences and eigenvalues
constexpr double kDensityScale = 1e-2;            // relative L2 distance of densities

int int_key(const std::string& file, const toml::table& t, const std::string& path, const std::string& key, int def,
            int min) {
  return detail::int_key(file, t, path, key, def, min, 1000000000, "expected an integer >= " + std::to_string(min));
}

// A per-field value: a number for every field of the block, or { field = number }.
std::optional<double> field_value(const std::string& file, const toml::table& block, const std::string& path,
                                  const std::string& key, const ParameterRef& p) {
  const toml::node* n = block.get(key);
  if (!n) return std::nullopt;
  if (n->is_number()) return finite_number(file, *n, path + "." + key);
  if (const toml::table* t = n->as_table()) {
    for (const auto& [k, v] : *t)
      if (std::string(k.str()) == p.field) return finite_number(file, v, path + "." + key + "." + p.field);
    return std::nullopt;
  }
  throw InputError(location(file, *n, path + "." + key), "expected a number, or a table { field = number }");
}

void check_field_table(const std::string& file, const toml::table& block, const std::string& path, const std::string& key,
                       const std::vector<std::string>& fields) {
  const toml::node* n = block.get(key);
  if (!n || !n->as_table()) return;
  for (const auto& [k, v] : *n->as_table()) {
    const std::string f(k.str());
    if (std::find(fields.begin(), fields.end(), f) == fields.end()) {
      const std::string near = nearest_word(f, fields);
      throw InputError(location(file, v, path + "." + key + "." + f),
                       "not a field of this parameter block" + (near.empty() ? "" : "; did you mean '" + near + "'?"));
    }
  }
}


FitWorkflow parse_root(toml::table& root, const std::string& file) {
  FitWorkflow wf;
  // [[dataset]] folders become [[system]] and [[loss]] tables first (same checks, same names).
  detail::expand_datasets(root, file);
  wf.file = file;
  detail::GradParsed parsed = detail::parse_grad_root(root, file, detail::fit_workflow_extras());
  GradInput& g = parsed.input;
  wf.warnings = g.warnings;

  // [fit]
  FitOptions& o = wf.spec.options;
  const toml::table empty;
  const toml::table* ft = &empty;
  if (const toml::node* fn = root.get("fit")) {
    ft = fn->as_table();
    if (!ft) throw InputError(location(file, *fn, "fit"), "expected a [fit] table");
  }
  const std::string fp = "fit";
  detail::check_keys(file, *ft, fp,
                     {"optimizer", "max_iterations", "gradient_tolerance", "step_tolerance", "loss_tolerance", "lbfgs_rank",
                      "threads", "checkpoint_every", "validation_every", "normalize", "validation_systems", "uncertainties",
                      "uncertainty_max_parameters", "ill_conditioned", "plots"},
                     /*list_valid=*/true);
  const std::string opt = string_key(file, *ft, fp, "optimizer", "lbfgs");
  if (opt == "levenberg_marquardt" || opt == "lm")
    o.optimizer = FitOptions::Optimizer::LevenbergMarquardt;
  else if (opt != "lbfgs")
    throw InputError(key_location(file, *ft, fp, "optimizer"), "optimizer must be \"lbfgs\" or \"levenberg_marquardt\"");
  o.max_iterations = int_key(file, *ft, fp, "max_iterations", o.max_iterations, 0);
  for (const char* k : {"gradient_tolerance", "step_tolerance", "loss_tolerance", "ill_conditioned"}) {
    const double v = number_key(file, *ft, fp, k, 1.0);
    if (!(v > 0)) throw InputError(key_location(file, *ft, fp, k), "must be positive");
  }
  o.gradient_tolerance = number_key(file, *ft, fp, "gradient_tolerance", o.gradient_tolerance);
  o.step_tolerance = number_key(file, *ft, fp, "step_tolerance", o.step_tolerance);
  o.loss_tolerance = number_key(file, *ft, fp, "loss_tolerance", o.loss_tolerance);
  o.ill_conditioned = number_key(file, *ft, fp, "ill_conditioned", o.ill_conditioned);
  o.lbfgs_rank = int_key(file, *ft, fp, "lbfgs_rank", o.lbfgs_rank, 1);
  o.threads = int_key(file, *ft, fp, "threads", o.threads, 1);
  o.checkpoint_every = int_key(file, *ft, fp, "checkpoint_every", o.checkpoint_every, 1);
  o.validation_every = int_key(file, *ft, fp, "validation_every", o.validation_every, 1);
  o.uncertainties = bool_key(file, *ft, fp, "uncertainties", o.uncertainties);
  o.uncertainty_max_parameters = int_key(file, *ft, fp, "uncertainty_max_parameters", o.uncertainty_max_parameters, 1);
  wf.plots = bool_key(file, *ft, fp, "plots", true);
  const bool normalize = bool_key(file, *ft, fp, "normalize", true);

  const auto& systems = g.base.systems;
  std::vector<bool> validation_system(systems.size(), false);
  if (const toml::node* vn = ft->get("validation_systems")) {
    const toml::array* a = vn->as_array();
    if (!a) throw InputError(location(file, *vn, "fit.validation_systems"), "expected a list of system names");
    std::vector<std::string> names;
    for (const auto& s : systems) names.push_back(s.name);
    for (const auto& e : *a) {
      auto n = e.value<std::string>();
      const auto it = n ? std::find(names.begin(), names.end(), *n) : names.end();
      if (it == names.end()) {
        const std::string near = n ? nearest_word(*n, names) : std::string();
        throw InputError(location(file, e, "fit.validation_systems"),
                         (n ? "no system named '" + *n + "'" : std::string("expected a system name")) +
                             (near.empty() ? "" : "; did you mean '" + near + "'?"));
      }
      validation_system[it - names.begin()] = true;
    }
  }

  // Parameters: start values first (they move the systems), then bounds, then the rest.
  detail::apply_fit_start_values(parsed, file);
  detail::check_parameter_bounds(parsed, file, o.optimizer == FitOptions::Optimizer::Lbfgs);
  const Eigen::VectorXd theta = parameter_values(systems, g.parameters);

  FitSpec& spec = wf.spec;
  std::vector<int> free_index;
  for (std::size_t i = 0; i < g.parameters.size(); ++i) {
    const ParameterRef& p = g.parameters[i];
    const int b = parsed.block_of[i];
    const toml::table& t = *parsed.parameter_blocks[b];
    const std::string path = "parameter[" + std::to_string(b) + "]";
    if (bool_key(file, t, path, "fixed", false)) {
      spec.fixed.push_back(p);
      continue;
    }
    FitParameterInfo info;
    info.block = b;
    const double floor = p.kind == ParameterRef::Kind::XcParameter ? 0.1 : 1.0;
    info.scale = number_key(file, t, path, "scale", std::max(std::abs(theta(i)), floor));
    if (!(info.scale > 0))
      throw InputError(key_location(file, t, path, "scale"), "must be positive (the parameter's typical size)");
    info.prior = field_value(file, t, path, "prior", p);
    info.prior_weight = number_key(file, t, path, "prior_weight", info.prior ? 1.0 : 0.0);
    if (info.prior_weight < 0) throw InputError(key_location(file, t, path, "prior_weight"), "must be >= 0");
    if (t.contains("prior_weight") && !info.prior) {
      if (p.kind == ParameterRef::Kind::GridPotential)
        info.prior = 0.0;  // pull toward zero: plain Tikhonov regularization of the potential
      else
        throw InputError(key_location(file, t, path, "prior_weight"), "prior_weight needs prior = value");
    }
    info.smoothness = number_key(file, t, path, "smoothness", 0.0);
    if (info.smoothness < 0) throw InputError(key_location(file, t, path, "smoothness"), "must be >= 0");
    if (info.smoothness > 0 && p.kind != ParameterRef::Kind::GridPotential)
      throw InputError(key_location(file, t, path, "smoothness"), "smoothness applies to grid_potential parameters only");
    info.published = field_value(file, t, path, "published", p);
    info.published_source = string_key(file, t, path, "published_source", "");
    spec.parameters.push_back(p);
    spec.info.push_back(info);
    free_index.push_back(static_cast<int>(i));
  }
  if (spec.parameters.empty())
    throw InputError(SourceLocation{file, 0, 0, "parameter"}, "every [[parameter]] is fixed: nothing to fit");

  // Loss terms: set and normalization.
  for (std::size_t i = 0; i < g.loss.size(); ++i) {
    LossTerm L = g.loss[i];
    const toml::table& t = *parsed.loss_tables[i];
    const std::string path = "loss[" + std::to_string(i) + "]";
    FitTermInfo info;
    const std::string set = string_key(file, t, path, "set", "");
    if (set.empty())
      info.validation = validation_system[L.system] || (L.system_b >= 0 && validation_system[L.system_b]);
    else if (set == "validation")
      info.validation = true;
    else if (set != "training")
      throw InputError(key_location(file, t, path, "set"), "set must be \"training\" or \"validation\"");
    info.user_weight = L.weight;
    if (L.weight < 0) throw InputError(key_location(file, t, path, "weight"), "weights must be >= 0");
    const SystemSpec& s = g.base.systems[L.system];
    double scale = 0.0;
    switch (L.kind) {
      case LossTerm::Kind::Energy:
        scale = kEnergyScalePerElectron * s.electron_count();
        break;
      case LossTerm::Kind::EnergyDifference:
      case LossTerm::Kind::Eigenvalue:
        scale = kEnergyScale;
        break;
      case LossTerm::Kind::Density:
        scale = kDensityScale;
        break;
    }
    scale = number_key(file, t, path, "scale", scale);
    if (!(scale > 0)) throw InputError(key_location(file, t, path, "scale"), "must be positive");
    if (L.kind == LossTerm::Kind::Density) {
      const Mesh mesh = mesh_of(s);
      const Eigen::VectorXd& W = mesh.density_weight();
      double n2 = 0.0;
      for (std::size_t k = 0; k < L.reference.size(); ++k)
        n2 += W(static_cast<Eigen::Index>(k)) * (L.region.empty() ? 1.0 : L.region[k]) * L.reference[k] * L.reference[k];
      info.reference_norm = std::sqrt(n2);
      if (!(n2 > 0))
        throw InputError(key_location(file, t, path, "reference"), "the reference density is zero where the term counts");
    }
    if (normalize) {
      info.scale = scale;
      if (L.kind == LossTerm::Kind::Density)
        info.multiplier = 1.0 / (scale * scale * info.reference_norm * info.reference_norm);
      else
        info.multiplier = L.target ? 1.0 / (scale * scale) : 1.0 / scale;
    }
    L.weight *= info.multiplier;
    (info.validation ? spec.validation : spec.training).push_back(L);
    (info.validation ? spec.validation_info : spec.training_info).push_back(info);
  }
  if (spec.training.empty()) {
    const toml::node* ln = root.get("loss");
    throw InputError(ln ? location(file, *ln, "loss") : SourceLocation{file, 0, 0, "loss"},
                     "the training set is empty: every [[loss]] term is in the validation set (set = \"validation\" or "
                     "[fit] validation_systems); the optimizer needs at least one training term");
  }
  // Every free parameter must move the training loss.
  std::vector<bool> trained(systems.size(), false);
  for (const LossTerm& L : spec.training) {
    trained[L.system] = true;
    if (L.system_b >= 0) trained[L.system_b] = true;
  }
  for (std::size_t j = 0; j < spec.parameters.size(); ++j) {
    const ParameterRef& p = spec.parameters[j];
    bool any = false;
    for (std::size_t s = 0; s < systems.size(); ++s) any = any || (trained[s] && (p.system < 0 || p.system == static_cast<int>(s)));
    if (!any) {
      const toml::table& t = *parsed.parameter_blocks[spec.info[j].block];
      const std::string path = "parameter[" + std::to_string(spec.info[j].block) + "]";
      throw InputError(key_location(file, t, path, "system"),
                       "parameter '" + p.name + "' acts only on systems outside the training set, so the training loss "
                       "does not depend on it; fix it or add training terms");
    }
  }
  if (o.optimizer == FitOptions::Optimizer::LevenbergMarquardt)
    for (std::size_t i = 0; i < g.loss.size(); ++i)
      if (g.loss[i].kind != LossTerm::Kind::Density && !g.loss[i].target)
        throw InputError(key_location(file, *parsed.loss_tables[i], "loss[" + std::to_string(i) + "]", "target"),
                         "levenberg_marquardt minimizes a sum of squares: this term needs a target (or use optimizer = \"lbfgs\")");
  spec.systems = g.base.systems;
  spec.gradient = g.options;
  wf.base = g.base;
  try {
    prepare_fit(spec);
  } catch (const InputError& e) {
    throw InputError(SourceLocation{file, 0, 0, ""}, e.what());
  }
  return wf;
}

}  // namespace

namespace detail {

GradReadExtras fit_workflow_extras() {
  GradReadExtras extras;
  extras.top_keys = {"fit", "dataset"};
  extras.parameter_keys = {"initial", "fixed", "prior", "prior_weight", "smoothness", "scale", "published", "published_source"};
  extras.loss_keys = {"set", "scale"};
  return extras;
}

void apply_fit_start_values(GradParsed& parsed, const std::string& file) {
  GradInput& g = parsed.input;
  const auto& systems = g.base.systems;
  Eigen::VectorXd theta = parameter_values(systems, g.parameters);
  std::map<std::string, std::vector<double>> start_tables;
  for (std::size_t i = 0; i < g.parameters.size(); ++i) {
    const ParameterRef& p = g.parameters[i];
    const int b = parsed.block_of[i];
    const toml::table& t = *parsed.parameter_blocks[b];
    const std::string path = "parameter[" + std::to_string(b) + "]";
    std::vector<std::string> fields;
    for (std::size_t j = 0; j < g.parameters.size(); ++j)
      if (parsed.block_of[j] == b) fields.push_back(g.parameters[j].field);
    for (const char* k : {"initial", "prior", "published"}) check_field_table(file, t, path, k, fields);
    const toml::node* in = t.get("initial");
    if (in && in->is_string()) {
      if (p.kind != ParameterRef::Kind::GridPotential)
        throw InputError(location(file, *in, path + ".initial"), "a file as start value is for grid_potential only");
      std::filesystem::path f(in->as_string()->get());
      if (f.is_relative()) f = std::filesystem::path(file).parent_path() / f;
      if (!std::filesystem::exists(f)) throw InputError(location(file, *in, path + ".initial"), "file not found: " + f.string());
      const SystemSpec& s = systems[p.system < 0 ? 0 : p.system];
      auto& values = start_tables[f.string() + "|" + s.name];
      if (values.empty()) {
        std::vector<std::string> w;
        values = detail::density_on_mesh(f.string(), s, w);  // the same two-column table reader; hartree
      }
      theta(i) = values[p.index];
    } else if (auto v = field_value(file, t, path, "initial", p)) {
      theta(i) = *v;
    }
  }
  g.base.systems = apply_parameters(g.base.systems, g.parameters, theta);
}

}  // namespace detail

FitWorkflow parse_fit_workflow(const std::string& text, const std::string& name) {
  toml::table root = detail::parse_toml(text, name);
  return parse_root(root, name);
}

FitWorkflow read_fit_workflow(const std::string& path) {
  return parse_fit_workflow(detail::read_text_file(path, "cannot open the workflow file"), path);
}

}  // namespace stillpoint
