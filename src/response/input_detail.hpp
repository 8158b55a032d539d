#pragma once
// Internal: the `grad` reader, shared with the `fit` workflow reader, which adds its own keys
// to the same [[parameter]] and [[loss]] tables and reads them itself.
#include <toml++/toml.h>

#include <string>
#include <vector>

#include "stillpoint/response/input.hpp"

namespace stillpoint::detail {

struct GradReadExtras {
  std::vector<std::string> top_keys;        ///< further top-level keys, read by the caller
  std::vector<std::string> parameter_keys;  ///< further [[parameter]] keys
  std::vector<std::string> loss_keys;       ///< further [[loss]] keys
  bool grad_table = true;                   ///< accept a [grad] table
};

struct GradParsed {
  GradInput input;
  std::vector<const toml::table*> parameter_blocks;  ///< every [[parameter]] table, in order
  std::vector<int> block_of;                         ///< block index of every ParameterRef
  std::vector<const toml::table*> loss_tables;       ///< the [[loss]] table of every LossTerm
};

/// Reads systems, parameters (with initial_model applied) and loss from a parsed file. The
/// pointers refer into `root`, which must outlive the result. Bounds are not checked here.
GradParsed parse_grad_root(const toml::table& root, const std::string& file, const GradReadExtras& extras);

/// The keys a fit workflow adds to the grad file format (docs/fit.md), read by the fit reader.
GradReadExtras fit_workflow_extras();

/// Applies the fit workflow's start values (`initial` of each [[parameter]], a number, a
/// table per field, or a file for grid_potential) to the systems of `parsed`. Defined in
/// fit_input.cpp; `grad` uses it to differentiate the point a fit would start from.
void apply_fit_start_values(GradParsed& parsed, const std::string& file);

/// InputError when a parameter's current value lies outside [lower, upper] or lower >= upper,
/// placed at the block's lower/upper key.
/// `strictly_inside`: a start on a finite bound is refused too (L-BFGS reparametrizes bounds
/// and cannot start on one).
void check_parameter_bounds(const GradParsed& parsed, const std::string& file, bool strictly_inside = false);

/// A density table (x or r in bohr, density) read from CSV: a header line names the columns
/// (the density column is the first named n, density, n_per_bohr or n_per_bohr3; otherwise the
/// second column), '#' comments. Interpolated onto the system's mesh by a natural cubic
/// spline, zero outside; a warning is added when the table stops where the density is not
/// negligible and the mesh extends further.
/// `density`: refuse negative values (beyond rounding) and a table that is nowhere positive.
std::vector<double> density_on_mesh(const std::string& path, const SystemSpec& system, std::vector<std::string>& warnings,
                                    bool density = false);

}  // namespace stillpoint::detail
