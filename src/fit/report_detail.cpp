#include "fit/report_detail.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <limits>
#include <map>
#include <numbers>
#include <set>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/xc/formula.hpp"

namespace stillpoint::fit_detail {

std::string toml_string(const std::string& s) {
  std::string o = "\"";
  for (char c : s) {
    if (c == '"' || c == '\\') {
      o += '\\';
      o += c;
    } else if (static_cast<unsigned char>(c) < 0x20) {
      char b[8];
      std::snprintf(b, sizeof b, "\\u%04x", c);
      o += b;
    } else {
      o += c;
    }
  }
  return o + "\"";
}

std::string csv_field(const std::string& s) {
  if (s.find_first_of(",\"\n") == std::string::npos) return s;
  std::string o = "\"";
  for (char c : s) o += c == '"' ? std::string("\"\"") : std::string(1, c);
  return o + "\"";
}


XcSettings settings_of(const SystemSpec& s) {
  XcSettings xs;
  xs.one_dimensional = s.geometry == Geometry::Line;
  xs.softening = s.line.electron_softening;
  xs.density_threshold = s.density_threshold;
  for (const FormulaSpec& f : s.formulas) xs.formulas.push_back(compile_formula(f));
  return xs;
}

const char* kind_name(LossTerm::Kind k) {
  switch (k) {
    case LossTerm::Kind::Density:
      return "density";
    case LossTerm::Kind::Energy:
      return "energy";
    case LossTerm::Kind::Eigenvalue:
      return "eigenvalue";
    case LossTerm::Kind::EnergyDifference:
      return "energy_difference";
  }
  return "?";
}

const char* parameter_kind(ParameterRef::Kind k) {
  switch (k) {
    case ParameterRef::Kind::XcWeight:
      return "xc_weight";
    case ParameterRef::Kind::XcParameter:
      return "xc_parameter";
    case ParameterRef::Kind::Gaussian:
      return "gaussian";
    case ParameterRef::Kind::Harmonic:
      return "harmonic";
    case ParameterRef::Kind::Nucleus:
      return "nucleus";
    case ParameterRef::Kind::GridPotential:
      return "grid_potential";
  }
  return "?";
}

std::vector<TermRow> term_rows(const FitWorkflow& wf, const FitResult& r) {
  std::vector<TermRow> rows;
  const FitSpec& s = wf.spec;
  auto at = [](const std::vector<double>& v, std::size_t i) {
    return i < v.size() ? v[i] : std::numeric_limits<double>::quiet_NaN();
  };
  for (std::size_t i = 0; i < s.training.size(); ++i)
    rows.push_back({&s.training[i], &s.training_info[i], false, at(r.before.training_quantities, i),
                    at(r.after.training_quantities, i), at(r.before.training_values, i), at(r.after.training_values, i)});
  for (std::size_t i = 0; i < s.validation.size(); ++i)
    rows.push_back({&s.validation[i], &s.validation_info[i], true, at(r.before.validation_quantities, i),
                    at(r.after.validation_quantities, i), at(r.before.validation_values, i),
                    at(r.after.validation_values, i)});
  return rows;
}

double term_error(const TermRow& t, double q) {
  if (t.term->kind == LossTerm::Kind::Density) {
    const double norm = t.info->reference_norm;
    return norm > 0 && q >= 0 ? std::sqrt(q) / norm : std::numeric_limits<double>::quiet_NaN();
  }
  return t.term->target ? q - *t.term->target : q;
}

const char* term_unit(const LossTerm& t) {
  return t.kind == LossTerm::Kind::Density ? "relative L2 distance" : "hartree";
}

std::string system_name(const FitWorkflow& wf, int s) { return s >= 0 ? wf.spec.systems[s].name : std::string("all"); }

double se(const FitResult& r, int i) {
  return r.uncertainty.computed && r.uncertainty.standard_error.size() > i ? r.uncertainty.standard_error(i)
                                                                            : std::numeric_limits<double>::quiet_NaN();
}
double se_unscaled(const FitResult& r, int i) {
  return r.uncertainty.computed && r.uncertainty.standard_error_unscaled.size() > i
             ? r.uncertainty.standard_error_unscaled(i)
             : std::numeric_limits<double>::quiet_NaN();
}

std::vector<XcCurve> xc_curves(const FitWorkflow& wf, const FitResult& r) {
  std::vector<XcCurve> out;
  const FitSpec& s = wf.spec;
  std::set<std::string> terms;
  for (const auto& p : s.parameters)
    if (p.kind == ParameterRef::Kind::XcParameter) terms.insert(s.systems[p.system < 0 ? 0 : p.system].xc[p.index]);
  if (terms.empty()) return out;
  const auto sys0 = apply_parameters(s.systems, s.parameters, r.initial);
  const auto sys1 = apply_parameters(s.systems, s.parameters, r.fitted);
  for (const std::string& term : terms) {
    // Group systems by their (initial, fitted) parameter values of this term.
    std::map<std::pair<std::vector<double>, std::vector<double>>, std::vector<std::size_t>> groups;
    for (std::size_t k = 0; k < s.systems.size(); ++k) {
      const auto it = std::find(s.systems[k].xc.begin(), s.systems[k].xc.end(), term);
      if (it == s.systems[k].xc.end()) continue;
      const std::size_t ti = static_cast<std::size_t>(it - s.systems[k].xc.begin());
      auto params = [&](const SystemSpec& sp) {
        if (ti < sp.xc_parameters.size() && !sp.xc_parameters[ti].empty()) return sp.xc_parameters[ti];
        return make_functional({term}, settings_of(sp)).term(0).parameters();
      };
      groups[{params(sys0[k]), params(sys1[k])}].push_back(k);
    }
    for (const auto& [pv, members] : groups) {
      const SystemSpec& ref = s.systems[members.front()];
      const XcSettings xs = settings_of(ref);
      const XcFunctional f0 = make_functional({term}, xs, {pv.first}), f1 = make_functional({term}, xs, {pv.second});
      XcCurve c;
      c.term = term;
      std::size_t with_term = 0;
      for (const auto& sp : s.systems) with_term += std::count(sp.xc.begin(), sp.xc.end(), term) > 0;
      if (members.size() == with_term && with_term > 1)
        c.label = "(all systems)";
      else
        for (std::size_t m = 0; m < members.size() && m < 3; ++m)
          c.label += (m ? "," : "") + s.systems[members[m]].name + (m == 2 && members.size() > 3 ? ",..." : "");
      c.gradient = f0.needs_gradient();
      c.one_dimensional = xs.one_dimensional;
      const int np = 200;
      XcPointData in;
      in.nspin = 1;
      in.np = np;
      in.rho.resize(np);
      in.sigma.assign(np, 0.0);
      const double pi = std::numbers::pi;
      for (int i = 0; i < np; ++i) {
        if (!c.gradient) {
          const double rs = 0.5 + 9.5 * i / (np - 1);  // bohr
          c.x.push_back(rs);
          in.rho[i] = xs.one_dimensional ? 0.5 / rs : 3.0 / (4.0 * pi * rs * rs * rs);
        } else {
          const double sred = 3.0 * i / (np - 1);  // reduced gradient, dimensionless
          c.x.push_back(sred);
          in.rho[i] = 1.0;  // F(s) of exchange-like terms does not depend on n; n = 1 bohr^-3 otherwise
          const double g = xs.one_dimensional ? sred * pi : sred * 2.0 * std::cbrt(3.0 * pi * pi);
          in.sigma[i] = g * g;
        }
      }
      XcDerivatives d0, d1;
      d0.reset(1, np, c.gradient, 1);
      d1.reset(1, np, c.gradient, 1);
      f0.evaluate(in, 1, d0);
      f1.evaluate(in, 1, d1);
      // Reference for the enhancement factor: local (Dirac) exchange per volume at n = 1.
      const double ex_lda = -0.75 * std::cbrt(3.0 / pi) * 1.0;
      for (int i = 0; i < np; ++i) {
        if (!c.gradient) {
          c.initial.push_back(d0.e[i] / in.rho[i]);
          c.fitted.push_back(d1.e[i] / in.rho[i]);
        } else {
          c.initial.push_back(d0.e[i] / ex_lda);
          c.fitted.push_back(d1.e[i] / ex_lda);
        }
      }
      out.push_back(std::move(c));
    }
  }
  return out;
}

bool has_potential_parameters(const FitSpec& s, int system) {
  for (const auto& p : s.parameters) {
    const bool pot = p.kind == ParameterRef::Kind::Gaussian || p.kind == ParameterRef::Kind::Harmonic ||
                     p.kind == ParameterRef::Kind::Nucleus || p.kind == ParameterRef::Kind::GridPotential;
    if (pot && (p.system < 0 || p.system == system)) return true;
  }
  return false;
}

const LossTerm* density_term(const FitSpec& s, int system) {
  for (const auto& t : s.training)
    if (t.kind == LossTerm::Kind::Density && t.system == system) return &t;
  for (const auto& t : s.validation)
    if (t.kind == LossTerm::Kind::Density && t.system == system) return &t;
  return nullptr;
}

void require_finite(const std::string& what, double v) {
  if (!std::isfinite(v)) throw NumericalError("refusing to write a non-finite value: " + what);
}
std::vector<SystemRow> system_rows(const FitWorkflow& wf, const FitResult& r, const std::vector<TermRow>& rows) {
  const FitSpec& s = wf.spec;
  std::vector<SystemRow> sys(s.systems.size());
  for (std::size_t k = 0; k < s.systems.size(); ++k) {
    if (k < r.before.solutions.size() && !r.before.solutions[k].v_s.empty()) sys[k].e0 = r.before.solutions[k].energy.total;
    if (k < r.after.solutions.size() && !r.after.solutions[k].v_s.empty()) sys[k].e1 = r.after.solutions[k].energy.total;
  }
  for (const auto& t : rows) {
    SystemRow& q = sys[t.term->system];
    (t.validation ? q.valid : q.train) = true;
    (t.validation ? q.v0 : q.t0) += std::isfinite(t.v0) ? t.v0 : 0.0;
    (t.validation ? q.v1 : q.t1) += std::isfinite(t.v1) ? t.v1 : 0.0;
  }
  return sys;
}

}  // namespace stillpoint::fit_detail
