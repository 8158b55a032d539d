// fit.json: everything a script needs from a fit, with units; missing values are null.
#include <nlohmann/json.hpp>

#include <algorithm>
#include <cmath>

#include "fit/report_detail.hpp"

namespace stillpoint::fit_detail {

namespace {
using nlohmann::json;
json jnum(double v) { return std::isfinite(v) ? json(v) : json(nullptr); }
}  // namespace

std::string fit_json(const FitWorkflow& wf, const FitResult& r, const std::vector<TermRow>& rows,
                     const std::vector<SystemRow>& systems, const OutputFiles& files) {
  const FitSpec& s = wf.spec;
  const int p = static_cast<int>(s.parameters.size());
  json j;
  j["units"] = {{"energy", "hartree"}, {"length", "bohr"}, {"loss", "dimensionless loss units (docs/fit.md)"}};
  j["workflow"] = wf.file;
  j["optimizer"] = s.options.optimizer == FitOptions::Optimizer::Lbfgs ? "lbfgs" : "levenberg_marquardt";
  j["termination"] = to_string(r.termination);
  j["message"] = r.message;
  int its = 0;
  for (const auto& h : r.history) its = std::max(its, h.iteration);
  j["iterations"] = its;
  j["evaluations"] = r.evaluations + r.replayed_evaluations;
  j["max_linear_residual"] = r.max_linear_residual;
  j["replayed_evaluations"] = r.replayed_evaluations;
  j["threads"] = s.options.threads;
  j["seconds"] = jnum(r.seconds);
  j["seconds_per_iteration"] = jnum(r.seconds_per_iteration);
  j["loss"] = {{"training", {{"initial", jnum(r.before.training_loss)}, {"fitted", jnum(r.after.training_loss)}}},
               {"regularization", {{"initial", jnum(r.before.regularization)}, {"fitted", jnum(r.after.regularization)}}},
               {"validation", {{"initial", jnum(r.before.validation_loss)}, {"fitted", jnum(r.after.validation_loss)}}}};
  json params = json::array();
  for (int i = 0; i < p; ++i) {
    const auto& q = s.parameters[i];
    const auto& in = s.info[i];
    params.push_back({{"name", q.name},
                      {"system", system_name(wf, q.system)},
                      {"kind", parameter_kind(q.kind)},
                      {"initial", jnum(r.initial(i))},
                      {"fitted", jnum(r.fitted(i))},
                      {"lower", jnum(q.lower)},
                      {"upper", jnum(q.upper)},
                      {"scale", jnum(in.scale)},
                      {"standard_error", jnum(se(r, i))},
                      {"standard_error_unscaled", jnum(se_unscaled(r, i))},
                      {"published", in.published ? jnum(*in.published) : json(nullptr)},
                      {"published_source", in.published_source}});
  }
  j["parameters"] = params;
  json fixed = json::array();
  const Eigen::VectorXd fv = parameter_values(s.systems, s.fixed);
  for (std::size_t i = 0; i < s.fixed.size(); ++i)
    fixed.push_back({{"name", s.fixed[i].name}, {"system", system_name(wf, s.fixed[i].system)}, {"value", jnum(fv(i))}});
  j["fixed_parameters"] = fixed;
  const FitUncertainty& u = r.uncertainty;
  json unc = {{"computed", u.computed},
              {"note", u.note},
              {"method", "Gauss-Newton: covariance s^2 (J^T J)^-1 with s^2 = RSS/(m - p); unscaled: (J^T J)^-1"},
              {"condition_number", jnum(u.condition_number)},
              {"ill_conditioned", u.ill_conditioned},
              {"residuals", u.residuals},
              {"degrees_of_freedom", u.degrees_of_freedom},
              {"residual_variance", jnum(u.residual_variance)}};
  if (u.computed) {
    json corr = json::array();
    for (int i = 0; i < p; ++i) {
      json row = json::array();
      for (int k = 0; k < p; ++k) row.push_back(jnum(u.correlation(i, k)));
      corr.push_back(row);
    }
    unc["correlation"] = corr;
  }
  j["uncertainty"] = unc;
  json terms = json::array();
  for (const auto& t : rows) {
    json e = {{"name", t.term->name},
              {"set", t.validation ? "validation" : "training"},
              {"kind", kind_name(t.term->kind)},
              {"system", system_name(wf, t.term->system)},
              {"unit", term_unit(*t.term)},
              {"weight", jnum(t.info->user_weight)},
              {"scale", jnum(t.info->scale)},
              {"error", {{"initial", jnum(term_error(t, t.q0))}, {"fitted", jnum(term_error(t, t.q1))}}},
              {"loss", {{"initial", jnum(t.v0)}, {"fitted", jnum(t.v1)}}}};
    if (t.term->system_b >= 0) e["minus"] = system_name(wf, t.term->system_b);
    if (t.term->target) e["target"] = jnum(*t.term->target);
    if (t.term->kind != LossTerm::Kind::Density) e["quantity"] = {{"initial", jnum(t.q0)}, {"fitted", jnum(t.q1)}};
    if (!t.term->state.empty()) e["state"] = t.term->state;
    terms.push_back(e);
  }
  j["terms"] = terms;
  json per_system = json::array();
  for (std::size_t k = 0; k < s.systems.size(); ++k) {
    const auto& q = systems[k];
    json e = {{"name", s.systems[k].name},
              {"electrons", s.systems[k].electron_count()},
              {"energy", {{"initial", jnum(q.e0)}, {"fitted", jnum(q.e1)}}}};
    if (q.train) e["training_loss"] = {{"initial", jnum(q.t0)}, {"fitted", jnum(q.t1)}};
    if (q.valid) e["validation_loss"] = {{"initial", jnum(q.v0)}, {"fitted", jnum(q.v1)}};
    per_system.push_back(e);
  }
  j["systems"] = per_system;
  json hist = json::array();
  for (const auto& h : r.history)
    hist.push_back({{"iteration", h.iteration},
                    {"loss", jnum(h.loss)},
                    {"gradient_norm", jnum(h.gradient_norm)},
                    {"validation_loss", jnum(h.validation_loss)},
                    {"seconds", jnum(h.seconds)},
                    {"step_successful", h.step_successful}});
  j["history"] = hist;
  j["rejected"] = r.rejected;
  std::vector<std::string> warnings = wf.warnings;
  warnings.insert(warnings.end(), r.warnings.begin(), r.warnings.end());
  j["warnings"] = warnings;
  json listing = json::array();
  for (const auto& f : files) listing.push_back(f.first);
  j["files"] = listing;
  return j.dump(2) + "\n";
}

}  // namespace stillpoint::fit_detail
