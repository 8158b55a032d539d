#pragma once
// Internal: what the writers of `fit`'s outputs share. report.cpp assembles the outputs and
// prints the terminal summary; report_tables.cpp writes the CSV tables, report_json.cpp
// fit.json, fitted_model.cpp the fitted-model file, plots.cpp the gnuplot scripts.
#include <string>
#include <vector>

#include "common/format.hpp"
#include "stillpoint/fit/report.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/xc/functional.hpp"

namespace stillpoint::fit_detail {

using detail::e12;
using detail::g12;
using detail::g17;
/// Terminal number: "n/a" for missing values (nothing non-finite is ever printed).
inline std::string sci(double v) { return detail::sci_or_na(v); }
/// CSV cell: empty for missing values.
inline std::string cell(double v) { return detail::csv_number(v); }

std::string toml_string(const std::string& s);
std::string csv_field(const std::string& s);
XcSettings settings_of(const SystemSpec& s);
const char* kind_name(LossTerm::Kind k);
const char* parameter_kind(ParameterRef::Kind k);

// One term of either set, with its values before and after.
struct TermRow {
  const LossTerm* term;
  const FitTermInfo* info;
  bool validation;
  double q0, q1, v0, v1;  // quantity and loss value, initial and fitted
};

std::vector<TermRow> term_rows(const FitWorkflow& wf, const FitResult& r);
/// The error a term measures: q - target (hartree) or the relative density distance.
double term_error(const TermRow& t, double q);
const char* term_unit(const LossTerm& t);
std::string system_name(const FitWorkflow& wf, int s);
/// Standard errors of the fitted parameters (NaN when not computed).
double se(const FitResult& r, int i);
double se_unscaled(const FitResult& r, int i);

// The fitted xc model as curves: energy per particle against r_s for local terms, the
// enhancement over local exchange against s for gradient terms.
struct XcCurve {
  std::string term, label;  // term name, systems it belongs to
  bool gradient = false, one_dimensional = false;
  std::vector<double> x, initial, fitted;
};

std::vector<XcCurve> xc_curves(const FitWorkflow& wf, const FitResult& r);
bool has_potential_parameters(const FitSpec& s, int system);
const LossTerm* density_term(const FitSpec& s, int system);
/// NumericalError naming `what` when v is not finite: nothing non-finite is ever written.
void require_finite(const std::string& what, double v);

/// Per system: total energy before and after, and the summed loss of its terms per set.
struct SystemRow {
  double e0 = NAN, e1 = NAN, t0 = 0, t1 = 0, v0 = 0, v1 = 0;
  bool train = false, valid = false;
};
std::vector<SystemRow> system_rows(const FitWorkflow& wf, const FitResult& r, const std::vector<TermRow>& rows);

/// parameters.csv, terms.csv, systems.csv, history.csv, correlation.csv, SYSTEM_density.csv,
/// SYSTEM_potential.csv and xc_model.csv, appended to `files`.
void add_tables(const FitWorkflow& wf, const FitResult& r, const std::vector<TermRow>& rows,
                const std::vector<SystemRow>& systems, OutputFiles& files);

/// fit.json, listing `files` (the other outputs).
std::string fit_json(const FitWorkflow& wf, const FitResult& r, const std::vector<TermRow>& rows,
                     const std::vector<SystemRow>& systems, const OutputFiles& files);

}  // namespace stillpoint::fit_detail
