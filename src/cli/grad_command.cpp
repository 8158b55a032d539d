// `stillpoint grad`: loss and exact gradient per named parameter, optionally verified against
// central finite differences of the whole converged program.
#include <cmath>
#include <cstdio>
#include <iostream>
#include <map>
#include <nlohmann/json.hpp>
#include <sstream>

#include "commands.hpp"
#include "stillpoint/common/atomic_file.hpp"
#include "stillpoint/response/input.hpp"
#include "stillpoint/numerics/mesh.hpp"

namespace sp = stillpoint;

int run_grad(const GradCommandOptions& o) {
  sp::GradInput in = sp::read_grad_input(o.input);
  if (o.mode == "tangent") in.options.mode = sp::GradientOptions::Mode::Tangent;
  if (o.mode == "adjoint") in.options.mode = sp::GradientOptions::Mode::Adjoint;
  if (o.verify) in.verify = true;
  if (o.verify_tolerance > 0) in.verify_tolerance = o.verify_tolerance;
  for (const auto& w : in.warnings) std::cerr << "stillpoint: warning: " << w << "\n";
  in.options.communicator = &ranks();
  sp::GradientProblem G(in.base.systems, in.parameters, in.loss, in.options);
  const Eigen::VectorXd theta = G.initial_values();
  if (!o.quiet)
    std::cerr << "  grad: " << G.active_systems().size() << " systems, " << theta.size() << " parameters ("
              << (in.options.mode == sp::GradientOptions::Mode::Adjoint ? "adjoint" : "tangent") << ")\n";
  const sp::GradientResult r = G.evaluate(theta);
  if (!o.quiet)
    std::cerr << "  grad: " << r.linear_solves << " linear solves, SCF " << r.scf_seconds << " s, derivatives "
              << r.gradient_seconds << " s\n";
  if (!std::isfinite(r.loss) || !r.gradient.allFinite())
    throw sp::NumericalError("the loss or its gradient is not finite; nothing was written");
  Eigen::VectorXd fd;
  bool verified = true;
  double worst = 0.0;
  if (in.verify) {
    sp::ScfOptions tight = in.options.scf;
    tight.potential_tolerance = std::min(tight.potential_tolerance, 1e-12);
    tight.energy_tolerance = std::min(tight.energy_tolerance, 1e-13);
    tight.eigenvalue_tolerance = std::min(tight.eigenvalue_tolerance, 1e-12);
    tight.max_iterations = std::max(tight.max_iterations, 400);
    if (!o.quiet) std::cerr << "  verifying " << theta.size() << " components by central differences (4 SCFs each)\n";
    // One line per component is too much for a grid potential: about twenty lines in all.
    const int every = std::max<int>(1, static_cast<int>(theta.size()) / 20);
    auto progress = [&](int done, int total) {
      if (!o.quiet && (done % every == 0 || done == total))
        std::cerr << "  verified " << done << "/" << total << " components\n";
    };
    fd = G.finite_difference_gradient(theta, sp::default_fd_steps(in.parameters, theta, in.verify_step), tight, progress);
  }
  const char* mode = in.options.mode == sp::GradientOptions::Mode::Adjoint ? "adjoint" : "tangent";
  std::ostringstream out;
  char buf[256];
  std::snprintf(buf, sizeof buf, "loss = %.12e  (%zu terms, %zu systems; energies in hartree, lengths in bohr)\n", r.loss,
                in.loss.size(), in.base.systems.size());
  out << buf;
  for (std::size_t i = 0; i < in.loss.size(); ++i) {
    std::snprintf(buf, sizeof buf, "  term %-28s %.12e\n", in.loss[i].name.c_str(), r.term_values[i]);
    out << buf;
  }
  const bool many = theta.size() > 40;
  out << (in.verify ? "  parameter                        value        gradient       finite diff.   rel. error\n"
                    : "  parameter                        value        gradient\n");
  for (int p = 0; p < theta.size(); ++p) {
    double rel = 0.0;
    if (in.verify) {
      const double err = std::abs(r.gradient(p) - fd(p));
      const bool ok = err <= in.verify_tolerance * std::abs(fd(p)) + in.verify_floor;
      rel = err / std::max(std::abs(fd(p)), in.verify_floor);
      worst = std::max(worst, ok ? 0.0 : rel);
      if (!ok) verified = false;
    }
    if (many && p >= 10 && p < theta.size() - 5 && !(in.verify && rel > in.verify_tolerance)) {
      if (p == 10) out << "  ... (" << theta.size() - 15 << " more; see --output for all)\n";
      continue;
    }
    if (in.verify)
      std::snprintf(buf, sizeof buf, "  %-28s % 14.8e % 15.8e % 15.8e  %9.2e%s\n", in.parameters[p].name.c_str(), theta(p),
                    r.gradient(p), fd(p), rel, rel > in.verify_tolerance ? "  FAIL" : "");
    else
      std::snprintf(buf, sizeof buf, "  %-28s % 14.8e % 15.8e\n", in.parameters[p].name.c_str(), theta(p), r.gradient(p));
    out << buf;
  }
  std::snprintf(buf, sizeof buf, "%s mode: %d linear solve(s), %d GMRES iterations; SCF %.3f s, gradient %.3f s\n", mode,
                r.linear_solves, r.krylov_iterations, r.scf_seconds, r.gradient_seconds);
  out << buf;
  const double krylov_tol = in.options.response.krylov_tolerance;
  if (r.linear_solves > 0 && r.max_linear_residual > krylov_tol) {
    std::snprintf(buf, sizeof buf,
                  "note: a linear solve stopped improving at relative residual %.1e (tolerance %.1e, accepted up to "
                  "%.1e): the gradient carries an error of about that relative size\n",
                  r.max_linear_residual, krylov_tol, in.options.response.krylov_floor);
    out << buf;
  }
  if (in.verify) {
    std::snprintf(buf, sizeof buf, "verify: %s (tolerance %.1e relative, floor %.1e)\n",
                  verified ? "PASS, every component agrees with central differences" : "FAIL", in.verify_tolerance,
                  in.verify_floor);
    out << buf;
  }
  std::cout << out.str();
  if (!o.output.empty() && writes_files()) {
    nlohmann::json j;
    j["units"] = {{"energy", "hartree"}, {"length", "bohr"}};
    j["mode"] = mode;
    j["loss"] = r.loss;
    nlohmann::json terms = nlohmann::json::array();
    for (std::size_t i = 0; i < in.loss.size(); ++i) terms.push_back({{"name", in.loss[i].name}, {"value", r.term_values[i]}});
    j["terms"] = terms;
    nlohmann::json params = nlohmann::json::array();
    for (int p = 0; p < theta.size(); ++p) {
      nlohmann::json e = {{"name", in.parameters[p].name}, {"value", theta(p)}, {"gradient", r.gradient(p)}};
      if (in.verify) e["finite_difference"] = fd(p);
      params.push_back(e);
    }
    j["parameters"] = params;
    j["linear_solves"] = r.linear_solves;
    j["krylov_iterations"] = r.krylov_iterations;
    j["max_linear_residual"] = r.max_linear_residual;
    j["krylov_tolerance"] = krylov_tol;
    j["seconds"] = {{"scf", r.scf_seconds}, {"gradient", r.gradient_seconds}};
    if (in.verify) j["verify"] = {{"passed", verified}, {"tolerance", in.verify_tolerance}, {"floor", in.verify_floor}};
    // Grid-valued parameters: the gradient field per system as CSV.
    std::map<int, std::vector<int>> grid;
    for (int p = 0; p < theta.size(); ++p)
      if (in.parameters[p].kind == sp::ParameterRef::Kind::GridPotential) grid[std::max(0, in.parameters[p].system)].push_back(p);
    std::vector<std::pair<std::string, std::string>> files;
    for (const auto& [sys, ps] : grid) {
      const sp::SystemSpec& s = in.base.systems[sys];
      const bool radial = s.geometry == sp::Geometry::Radial;
      const sp::Mesh mesh = radial ? sp::Mesh::radial(s.grid, s.atom.Z) : sp::Mesh::line(s.grid);
      std::ostringstream csv;
      csv << "# d(loss)/d(v_ext at node) for system " << s.name << "; " << (radial ? "r" : "x")
          << " in bohr, gradient in loss units per hartree\n";
      csv << (radial ? "r_bohr" : "x_bohr") << ",dloss_dv_per_hartree,quadrature_weight\n";
      for (int p : ps) {
        const int k = in.parameters[p].index;
        std::snprintf(buf, sizeof buf, "%.12e,%.12e,%.12e\n", mesh.x()(k), r.gradient(p), mesh.density_weight()(k));
        csv << buf;
      }
      files.emplace_back(o.output + "/" + s.name + "_potential_gradient.csv", csv.str());
    }
    std::vector<std::pair<std::string, std::string>> set(files.begin(), files.end());  // all or none
    set.emplace_back(o.output + "/grad.json", j.dump(2) + "\n");
    sp::write_files_atomically(set);
    std::cout << "  wrote " << o.output << "/grad.json" << (files.empty() ? "" : " and the gradient field CSV") << "\n";
  }
  return verified ? 0 : 1;
}
