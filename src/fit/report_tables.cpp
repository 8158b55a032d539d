// The CSV tables of a fit: one row per parameter, term, system, iteration; densities and
// potentials per system on the mesh; the fitted xc model as curves.
#include <cmath>
#include <filesystem>
#include <numbers>
#include <sstream>

#include "fit/report_detail.hpp"

namespace stillpoint::fit_detail {

namespace fs = std::filesystem;

void add_tables(const FitWorkflow& wf, const FitResult& r, const std::vector<TermRow>& rows,
                const std::vector<SystemRow>& systems, OutputFiles& files) {
  const FitSpec& s = wf.spec;
  const int p = static_cast<int>(s.parameters.size());
  // parameters.csv
  {
    std::ostringstream c;
    c << "# fitted parameters (stillpoint fit " << fs::path(wf.file).filename().string()
      << "); values in the parameter's own units (hartree, bohr, or dimensionless model coefficients)\n";
    c << "name,system,kind,initial,fitted,lower,upper,standard_error,standard_error_unscaled,published,published_source\n";
    for (int i = 0; i < p; ++i) {
      const auto& q = s.parameters[i];
      const auto& in = s.info[i];
      c << csv_field(q.name) << "," << csv_field(system_name(wf, q.system)) << "," << parameter_kind(q.kind) << ","
        << e12(r.initial(i)) << "," << e12(r.fitted(i)) << "," << cell(q.lower) << "," << cell(q.upper) << ","
        << cell(se(r, i)) << "," << cell(se_unscaled(r, i)) << ","
        << (in.published ? e12(*in.published) : std::string()) << "," << csv_field(in.published_source) << "\n";
    }
    files.emplace_back("parameters.csv", c.str());
  }
  // terms.csv
  {
    std::ostringstream c;
    c << "# every loss term before and after the fit; quantity and error in hartree (energies, eigenvalues) or as the "
         "relative L2 distance (densities); loss in loss units (docs/fit.md)\n";
    c << "set,term,kind,system,minus,unit,target,quantity_initial,quantity_fitted,error_initial,error_fitted,loss_initial,"
         "loss_fitted,scale,weight\n";
    for (const auto& t : rows) {
      const bool dens = t.term->kind == LossTerm::Kind::Density;
      c << (t.validation ? "validation" : "training") << "," << csv_field(t.term->name) << "," << kind_name(t.term->kind)
        << "," << csv_field(system_name(wf, t.term->system)) << ","
        << (t.term->system_b >= 0 ? csv_field(system_name(wf, t.term->system_b)) : std::string()) << "," << term_unit(*t.term)
        << "," << (t.term->target ? e12(*t.term->target) : std::string()) << "," << (dens ? "" : cell(t.q0)) << ","
        << (dens ? "" : cell(t.q1)) << "," << cell(term_error(t, t.q0)) << "," << cell(term_error(t, t.q1)) << ","
        << cell(t.v0) << "," << cell(t.v1) << "," << cell(t.info->scale) << "," << cell(t.info->user_weight) << "\n";
    }
    files.emplace_back("terms.csv", c.str());
  }
  {
    std::ostringstream c;
    c << "# per system: total energy (hartree) and summed loss of its terms (loss units; an energy difference counts "
         "for its first system), before and after the fit\n";
    c << "system,kind,sets,electrons,energy_initial_hartree,energy_fitted_hartree,training_loss_initial,"
         "training_loss_fitted,validation_loss_initial,validation_loss_fitted\n";
    for (std::size_t k = 0; k < s.systems.size(); ++k) {
      const auto& q = systems[k];
      const std::string sets = q.train && q.valid ? "training+validation" : q.train ? "training" : q.valid ? "validation" : "none";
      c << csv_field(s.systems[k].name) << "," << (s.systems[k].geometry == Geometry::Line ? "line" : "atom") << "," << sets
        << "," << g12(s.systems[k].electron_count()) << "," << cell(q.e0) << "," << cell(q.e1) << ","
        << (q.train ? e12(q.t0) : "") << "," << (q.train ? e12(q.t1) : "") << "," << (q.valid ? e12(q.v0) : "") << ","
        << (q.valid ? e12(q.v1) : "") << "\n";
    }
    files.emplace_back("systems.csv", c.str());
  }
  // history.csv
  {
    std::ostringstream c;
    c << "# one row per optimizer iteration; loss in loss units, gradient norm in loss units per parameter unit, "
         "seconds of wall time since the start\n";
    c << "iteration,loss,gradient_norm,validation_loss,seconds,step_successful\n";
    for (const auto& h : r.history)
      c << h.iteration << "," << cell(h.loss) << "," << cell(h.gradient_norm) << "," << cell(h.validation_loss) << ","
        << cell(h.seconds) << "," << (h.step_successful ? 1 : 0) << "\n";
    files.emplace_back("history.csv", c.str());
  }
  // correlation.csv
  if (r.uncertainty.computed) {
    std::ostringstream c;
    c << "# correlation matrix of the fitted parameters (Gauss-Newton approximation at the optimum)\nparameter";
    for (int i = 0; i < p; ++i) c << "," << csv_field(s.parameters[i].name);
    c << "\n";
    for (int i = 0; i < p; ++i) {
      c << csv_field(s.parameters[i].name);
      for (int j = 0; j < p; ++j) c << "," << cell(r.uncertainty.correlation(i, j));
      c << "\n";
    }
    files.emplace_back("correlation.csv", c.str());
  }
  // Densities and potentials.
  for (std::size_t k = 0; k < s.systems.size(); ++k) {
    const bool have0 = k < r.before.solutions.size() && !r.before.solutions[k].v_s.empty();
    const bool have1 = k < r.after.solutions.size() && !r.after.solutions[k].v_s.empty();
    if (!have0 || !have1) continue;
    const SystemSpec& sp = s.systems[k];
    const Mesh m = mesh_of(sp);
    const bool line = sp.geometry == Geometry::Line;
    const LossTerm* dt = density_term(s, static_cast<int>(k));
    const Eigen::VectorXd n0 = r.before.solutions[k].total_density(), n1 = r.after.solutions[k].total_density();
    std::ostringstream c;
    c << "# density of " << sp.name << ": reference, initial and fitted; " << (line ? "x in bohr, n in electrons/bohr"
                                                                                   : "r in bohr, n in electrons/bohr^3, "
                                                                                     "radial_* = 4 pi r^2 n in electrons/bohr")
      << "\n";
    c << (line ? "x_bohr,n_reference_per_bohr,n_initial_per_bohr,n_fitted_per_bohr\n"
               : "r_bohr,n_reference_per_bohr3,n_initial_per_bohr3,n_fitted_per_bohr3,radial_reference,radial_initial,"
                 "radial_fitted\n");
    for (int i = line ? 0 : 1; i < m.num_nodes(); ++i) {
      const double x = m.x()(i);
      const double ref = dt ? dt->reference[i] : NAN;
      c << e12(x) << "," << cell(ref) << "," << e12(n0(i)) << "," << e12(n1(i));
      if (!line) {
        const double f = 4.0 * std::numbers::pi * x * x;
        c << "," << cell(f * ref) << "," << e12(f * n0(i)) << "," << e12(f * n1(i));
      }
      c << "\n";
    }
    files.emplace_back(sp.name + "_density.csv", c.str());
    if (line && has_potential_parameters(s, static_cast<int>(k))) {
      std::ostringstream v;
      v << "# external potential of " << sp.name << " before and after the fit; x in bohr, v in hartree\n";
      v << "x_bohr,v_ext_initial_hartree,v_ext_fitted_hartree\n";
      const Eigen::VectorXd& a = r.before.solutions[k].v_ext;
      const Eigen::VectorXd& b = r.after.solutions[k].v_ext;
      for (int i = 0; i < m.num_nodes(); ++i) v << e12(m.x()(i)) << "," << cell(a(i)) << "," << cell(b(i)) << "\n";
      files.emplace_back(sp.name + "_potential.csv", v.str());
    }
  }
  // xc_model.csv
  const auto curves = xc_curves(wf, r);
  if (!curves.empty()) {
    std::ostringstream c;
    c << "# fitted xc model terms: for local terms eps per particle (hartree) against r_s (bohr; 1D: r_s = 1/(2n)); for "
         "gradient terms the enhancement e/e_x^LDA at n = 1 bohr^-3 against the reduced gradient s\n";
    c << "term,systems,variable,x,initial,fitted\n";
    for (const auto& cv : curves)
      for (std::size_t i = 0; i < cv.x.size(); ++i)
        c << csv_field(cv.term) << "," << csv_field(cv.label) << "," << (cv.gradient ? "s" : "rs_bohr") << "," << e12(cv.x[i])
          << "," << cell(cv.initial[i]) << "," << cell(cv.fitted[i]) << "\n";
    files.emplace_back("xc_model.csv", c.str());
  }
}

}  // namespace stillpoint::fit_detail
