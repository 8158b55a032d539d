#pragma once
// What `fit` writes: the JSON report, CSV tables, the fitted-model file (a `solve` input
// that `grad` and later fits also accept through initial_model), and gnuplot plots.
// Every file is produced as (name relative to the output directory, content) and written
// atomically by the caller; plots are rendered by gnuplot when it is installed.
#include <string>
#include <utility>
#include <vector>

#include "stillpoint/fit/fit.hpp"
#include "stillpoint/fit/input.hpp"

namespace stillpoint {

using OutputFiles = std::vector<std::pair<std::string, std::string>>;

/// fit.json, parameters.csv, terms.csv, systems.csv, history.csv, correlation.csv,
/// SYSTEM_density.csv, SYSTEM_potential.csv (line systems with potential parameters),
/// xc_model.csv (fitted model terms), fitted-model.toml and the tables it refers to.
/// Throws NumericalError if a value to be written is not finite.
OutputFiles fit_output_files(const FitWorkflow& workflow, const FitResult& result);

/// The fitted model: a complete `solve` input with every fitted value in place.
/// `tables` receives the CSV files it refers to (grid potentials, copied potential tables).
std::string fitted_model_toml(const FitWorkflow& workflow, const Eigen::VectorXd& theta, OutputFiles& tables);

/// Plain-text summary for the terminal (parameters with errors and published values, loss
/// before and after per set, warnings).
std::string fit_summary(const FitWorkflow& workflow, const FitResult& result);

/// gnuplot scripts (plots/*.gp, with their data in the CSV files) for the loss history,
/// density overlays, the fitted xc model and fitted potentials, PNG and SVG.
OutputFiles fit_plot_scripts(const FitWorkflow& workflow, const FitResult& result);

/// Runs every plots/*.gp of `dir` with gnuplot. Returns a one-line notice (empty on success):
/// gnuplot is missing, or a script failed.
std::string render_plots(const std::string& dir, const OutputFiles& scripts);

}  // namespace stillpoint
