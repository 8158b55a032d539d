#include "stillpoint/fit/report.hpp"

#include <cstdio>
#include <filesystem>
#include <sstream>

#include "fit/report_detail.hpp"

namespace stillpoint {

using namespace fit_detail;
namespace fs = std::filesystem;

// ---------------------------------------------------------------------------------------
OutputFiles fit_output_files(const FitWorkflow& wf, const FitResult& r) {
  OutputFiles files;
  const FitSpec& s = wf.spec;
  const auto rows = term_rows(wf, r);
  const int p = static_cast<int>(s.parameters.size());
  for (int i = 0; i < p; ++i) require_finite("fitted parameter " + s.parameters[i].name, r.fitted(i));
  require_finite("training loss", r.after.training_loss);
  const auto systems = system_rows(wf, r, rows);
  add_tables(wf, r, rows, systems, files);
  OutputFiles tables;
  files.emplace_back("fitted-model.toml", fitted_model_toml(wf, r.fitted, tables));
  for (auto& t : tables) files.push_back(std::move(t));
  files.emplace(files.begin(), "fit.json", fit_json(wf, r, rows, systems, files));
  return files;
}

// ---------------------------------------------------------------------------------------
std::string fit_summary(const FitWorkflow& wf, const FitResult& r) {
  const FitSpec& s = wf.spec;
  std::ostringstream o;
  char b[400];
  int its = 0;
  for (const auto& h : r.history) its = std::max(its, h.iteration);
  std::snprintf(b, sizeof b, "fit: %s after %d iterations (%d evaluations%s), %.2f s; %s\n", to_string(r.termination).c_str(),
                its, r.evaluations + r.replayed_evaluations,
                r.replayed_evaluations ? (", " + std::to_string(r.replayed_evaluations) + " replayed").c_str() : "",
                r.seconds, r.message.c_str());
  o << b;
  std::snprintf(b, sizeof b, "  training loss   %s -> %s   (regularization %s; loss units, docs/fit.md)\n",
                sci(r.before.training_loss).c_str(), sci(r.after.training_loss).c_str(), sci(r.after.regularization).c_str());
  o << b;
  if (!s.validation.empty()) {
    std::snprintf(b, sizeof b, "  validation loss %s -> %s   (never used by the optimizer)\n", sci(r.before.validation_loss).c_str(),
                  sci(r.after.validation_loss).c_str());
    o << b;
  }
  const int p = static_cast<int>(s.parameters.size());
  const bool many = p > 30;
  o << "  parameter                          initial          fitted      std. error     published\n";
  for (int i = 0; i < p; ++i) {
    if (many && i >= 10 && i < p - 5) {
      if (i == 10) o << "  ... (" << p - 15 << " more in parameters.csv)\n";
      continue;
    }
    const auto& in = s.info[i];
    char err[40] = "-";
    if (std::isfinite(se(r, i)))
      std::snprintf(err, sizeof err, "%.3e", se(r, i));
    else if (std::isfinite(se_unscaled(r, i)))
      std::snprintf(err, sizeof err, "(%.3e)", se_unscaled(r, i));
    std::snprintf(b, sizeof b, "  %-28s % 15.8g % 15.10g  %12s  %s\n", s.parameters[i].name.c_str(), r.initial(i),
                  r.fitted(i), err,
                  in.published ? (g12(*in.published) + (in.published_source.empty() ? "" : " (" + in.published_source + ")")).c_str()
                               : "");
    o << b;
  }
  if (r.uncertainty.computed && r.uncertainty.standard_error.size() == 0)
    o << "  (errors in parentheses: the normalization scales taken as standard deviations; " << r.uncertainty.note << ")\n";
  else if (!r.uncertainty.computed && !r.uncertainty.note.empty())
    o << "  no standard errors: " << r.uncertainty.note << "\n";
  const auto rows = term_rows(wf, r);
  o << "  term                               set          error before     error after    (hartree; densities: relative L2)\n";
  int shown = 0;
  for (const auto& t : rows) {
    if (++shown > 40) {
      o << "  ... (" << rows.size() - 40 << " more in terms.csv)\n";
      break;
    }
    std::snprintf(b, sizeof b, "  %-34s %-10s %15s %15s\n", t.term->name.c_str(), t.validation ? "validation" : "training",
                  sci(term_error(t, t.q0)).c_str(), sci(term_error(t, t.q1)).c_str());
    o << b;
  }
  for (const auto& w : r.warnings) o << "  warning: " << w << "\n";
  if (!r.rejected.empty()) o << "  " << r.rejected.size() << " trial point(s) rejected (listed in fit.json)\n";
  return o.str();
}

}  // namespace stillpoint
