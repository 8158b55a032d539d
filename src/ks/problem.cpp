#include "stillpoint/ks/problem.hpp"

#include "common/toml_input.hpp"

#include <algorithm>
#include <cmath>
#include <numbers>
#include <sstream>

#include "stillpoint/common/errors.hpp"
#include "stillpoint/numerics/kinetic.hpp"

namespace stillpoint {

namespace {

const char* l_letter(int l) {
  static const char* letters[] = {"s", "p", "d", "f", "g", "h"};
  return l >= 0 && l < 6 ? letters[l] : "?";
}

// Aufbau with a fixed capacity per state; fractional remainders go to the last state.
std::vector<double> aufbau(double electrons, double capacity) {
  std::vector<double> occ;
  double left = electrons;
  while (left > 1e-12) {
    const double f = std::min(capacity, left);
    occ.push_back(f);
    left -= f;
  }
  return occ;
}

std::string describe_occupations(const std::vector<double>& occ) {
  std::string s = detail::preview_list(occ);
  return s.substr(1, s.find(']') - 1) + s.substr(s.find(']') + 1);
}

}  // namespace

KsProblem::KsProblem(const SystemSpec& spec) : spec_(spec) {
  electrons_ = spec.electron_count();
  if (!(electrons_ > 0))
    throw InputError("system '" + spec.name + "' has " + std::to_string(electrons_) +
                     " electrons: the charge must be smaller than the total nuclear charge");
  density_threshold_ = spec.density_threshold;
  build_xc();

  if (spec.geometry == Geometry::Radial) {
    const int Z = spec.atom.Z;
    if (spec.grid.first_element / (spec.grid.first_element_over_z ? Z : 1.0) > 2.0 / Z)
      throw InputError("the radial grid is too coarse for Z = " + std::to_string(Z) + ": the first element (" +
                       std::to_string(spec.grid.first_element / (spec.grid.first_element_over_z ? Z : 1.0)) +
                       " bohr) must be at most about 1/Z bohr; use a grid preset or first_element <= 1 with "
                       "first_element_over_z = true");
    mesh_ = std::make_shared<Mesh>(Mesh::radial(spec.grid, Z));
    const double count = stillpoint::electron_count(spec.atom.configuration);
    if (std::abs(count - electrons_) > 1e-9) {
      std::ostringstream s;
      s << "configuration '" << format_configuration(spec.atom.configuration) << "' holds " << count
        << " electrons but Z - charge = " << electrons_;
      throw InputError(s.str());
    }
    int lmax = 0;
    for (const auto& sh : spec.atom.configuration) lmax = std::max(lmax, sh.l);
    for (int l = 0; l <= lmax; ++l) {
      int nmax = 0;
      for (const auto& sh : spec.atom.configuration)
        if (sh.l == l) nmax = std::max(nmax, sh.n);
      if (nmax == 0) continue;
      const int states = nmax - l;
      for (int s = 0; s < nspin(); ++s) {
        Channel c;
        c.l = l;
        c.spin = s;
        c.states = states;
        c.occupations.assign(states, 0.0);
        for (int i = 0; i < states; ++i) c.labels.push_back(std::to_string(l + 1 + i) + l_letter(l));
        channels_.push_back(c);
      }
    }
    for (auto& c : channels_) {
      for (const auto& sh : spec.atom.configuration) {
        if (sh.l != c.l) continue;
        const int i = sh.n - c.l - 1;
        if (!spec.spin_polarized) {
          c.occupations[i] = sh.occupation;
        } else {
          const auto sp = split_spins_hund({sh});
          c.occupations[i] = c.spin == 0 ? sp[0].majority : sp[0].minority;
        }
      }
    }
    v_ext_ = Eigen::VectorXd::Zero(mesh_->num_nodes());
    for (int k = 1; k < mesh_->num_nodes(); ++k) v_ext_(k) = -Z / mesh_->x()(k);
    if (!spec.nodal_potential.empty()) {
      if (static_cast<int>(spec.nodal_potential.size()) != mesh_->num_nodes())
        throw InputError("nodal_potential has " + std::to_string(spec.nodal_potential.size()) + " values for " +
                         std::to_string(mesh_->num_nodes()) + " grid nodes");
      for (int k = 1; k < mesh_->num_nodes(); ++k) v_ext_(k) += spec.nodal_potential[k];
    }
    // `interacting = false` (SystemSpec::line.interacting, used by both geometries) drops the
    // Hartree term: the non-interacting problems of Kohn–Sham inversion.
    if (spec.line.interacting) hartree_ = std::make_unique<Hartree>(*mesh_, 0.0);
  } else {
    const LineSystem& ls = spec.line;
    const double L = spec.grid.half_width;
    double min_soft = ls.interacting ? ls.electron_softening : 1e300;
    for (const auto& nuc : ls.nuclei) {
      if (std::abs(nuc.position) > L - 4.0)
        throw InputError("nucleus at x = " + std::to_string(nuc.position) + " bohr is too close to the box edge " +
                         std::to_string(L) + " bohr: increase grid.half_width");
      if (!(nuc.softening > 0)) throw InputError("every nucleus needs a positive softening");
      min_soft = std::min(min_soft, nuc.softening);
    }
    const double spacing = spec.grid.element_size / spec.grid.degree;
    if (spacing > 0.5 * min_soft)
      throw InputError("the 1D grid is too coarse: mean node spacing " + std::to_string(spacing) +
                       " bohr exceeds half the smallest softening (" + std::to_string(min_soft) +
                       " bohr); reduce grid.element_size or raise grid.degree");
    mesh_ = std::make_shared<Mesh>(Mesh::line(spec.grid));
    v_ext_ = Eigen::VectorXd::Zero(mesh_->num_nodes());
    for (int k = 0; k < mesh_->num_nodes(); ++k) {
      const double x = mesh_->x()(k);
      double v = 0.0;
      for (const auto& nuc : ls.nuclei)
        v -= nuc.charge / std::sqrt((x - nuc.position) * (x - nuc.position) + nuc.softening * nuc.softening);
      for (const auto& t : ls.potentials) v += t.value(x);
      v_ext_(k) = v;
    }
    if (!spec.nodal_potential.empty()) {
      if (static_cast<int>(spec.nodal_potential.size()) != mesh_->num_nodes())
        throw InputError("nodal_potential has " + std::to_string(spec.nodal_potential.size()) + " values for " +
                         std::to_string(mesh_->num_nodes()) + " grid nodes");
      for (int k = 0; k < mesh_->num_nodes(); ++k) v_ext_(k) += spec.nodal_potential[k];
    }
    const double b = std::isnan(ls.nucleus_softening) ? ls.electron_softening : ls.nucleus_softening;
    for (std::size_t i = 0; i < ls.nuclei.size(); ++i)
      for (std::size_t j = i + 1; j < ls.nuclei.size(); ++j) {
        const double d = ls.nuclei[i].position - ls.nuclei[j].position;
        const double r = std::sqrt(d * d + b * b);
        if (!(r > 0)) throw InputError("two nuclei at the same position with zero nucleus_softening");
        e_nn_ += ls.nuclei[i].charge * ls.nuclei[j].charge / r;
      }
    if (ls.interacting) hartree_ = std::make_unique<Hartree>(*mesh_, ls.electron_softening);
    // Occupations per spin channel.
    std::vector<std::vector<double>> occ(nspin());
    const double capacity = spec.spin_polarized ? 1.0 : 2.0;
    if (!spec.occupations.empty()) {
      if (static_cast<int>(spec.occupations.size()) != nspin())
        throw InputError("occupations: give " + std::to_string(nspin()) + " list(s), one per spin channel");
      double total = 0.0;
      for (int s = 0; s < nspin(); ++s) {
        for (double f : spec.occupations[s]) {
          if (f < 0.0 || f > capacity + 1e-12)
            throw InputError("occupation " + std::to_string(f) + " outside [0, " + std::to_string(capacity) +
                             "] for a state of this spin setting");
          total += f;
        }
        occ[s] = spec.occupations[s];
      }
      if (std::abs(total - electrons_) > 1e-9)
        throw InputError("occupations sum to " + std::to_string(total) + " but the system has " +
                         std::to_string(electrons_) + " electrons");
    } else if (electrons_ / capacity >= mesh_->num_unknowns()) {
      // Checked before aufbau builds a list with one entry per state.
      throw InputError("the system has " + detail::format_number(electrons_, 6) + " electrons but the grid has only " +
                       std::to_string(mesh_->num_unknowns()) + " unknowns for their states: use a larger grid");
    } else if (!spec.spin_polarized) {
      occ[0] = aufbau(electrons_, 2.0);
    } else {
      double nu, nd;
      if (spec.n_up || spec.n_down) {
        nu = spec.n_up ? *spec.n_up : electrons_ - *spec.n_down;
        nd = spec.n_down ? *spec.n_down : electrons_ - nu;
      } else {
        const double half = 0.5 * electrons_;
        const bool integer = std::abs(electrons_ - std::round(electrons_)) < 1e-12;
        nu = integer ? std::ceil(half - 1e-12) : half;
        nd = electrons_ - nu;
      }
      if (nu < 0 || nd < 0 || std::abs(nu + nd - electrons_) > 1e-9)
        throw InputError("n_up + n_down must equal the electron count " + std::to_string(electrons_) +
                         " and both must be non-negative");
      occ[0] = aufbau(nu, 1.0);
      occ[1] = aufbau(nd, 1.0);
    }
    for (int s = 0; s < nspin(); ++s) {
      Channel c;
      c.spin = s;
      c.occupations = occ[s];
      // Before the labels are built: unoccupied_levels comes from the input and may be absurd.
      const long long states = static_cast<long long>(occ[s].size()) + std::max(spec.unoccupied_levels, occ[s].empty() ? 1 : 0);
      if (states >= mesh_->num_unknowns())
        throw InputError("the grid has only " + std::to_string(mesh_->num_unknowns()) + " unknowns for " +
                         std::to_string(states) + " states (occupations " + describe_occupations(occ[s]) +
                         "): use a larger grid");
      c.states = static_cast<int>(states);
      for (int i = 0; i < c.states; ++i) c.labels.push_back(std::to_string(i + 1));
      channels_.push_back(c);
    }
  }
  for (const auto& c : channels_)
    for (double f : c.occupations) spin_electrons_[c.spin] += f;
  const double up = spin_electrons_[0], down = spin_electrons_[1];
  if (nspin() == 2 && up > 0.0 && down > 0.0 && std::abs(up - down) > 1e-12)
    for (std::size_t i = 0; i < xc_.size(); ++i)
      if (const std::string why = xc_.term(i).open_shell_refusal(); !why.empty())
        throw InputError("spin-polarized with " + detail::format_number(up, 6) + " up and " +
                         detail::format_number(down, 6) + " down electrons: " + why);
  int lmax = 0;
  for (const auto& c : channels_) lmax = std::max(lmax, c.l);
  const Mesh& m = *mesh_;
  for (int l = 0; l <= lmax; ++l) {
    kinetic_.push_back(scaled_kinetic(m, l));
    solvers_.emplace_back(kinetic_.back());
  }
  for (const auto& c : channels_)
    if (c.states >= m.num_unknowns())
      throw InputError("the grid has only " + std::to_string(m.num_unknowns()) + " unknowns for " +
                       std::to_string(c.states) + " states (occupations " + describe_occupations(c.occupations) +
                       "): use a larger grid");
}

void KsProblem::build_xc() {
  XcSettings xs;
  xs.one_dimensional = spec_.geometry == Geometry::Line;
  xs.softening = spec_.line.electron_softening;
  xs.density_threshold = density_threshold_;
  for (const FormulaSpec& f : spec_.formulas) xs.formulas.push_back(compile_formula(f));
  xc_ = make_functional(spec_.xc, xs, spec_.xc_parameters);
  if (!spec_.xc_weights.empty()) {
    if (spec_.xc_weights.size() != xc_.size())
      throw InputError("xc_weights has " + std::to_string(spec_.xc_weights.size()) + " entries for " +
                       std::to_string(xc_.size()) + " functional terms");
    for (std::size_t i = 0; i < xc_.size(); ++i) xc_.set_weight(i, xc_.weight(i) * spec_.xc_weights[i]);
  }
}

void KsProblem::set_density_threshold(double t) {
  density_threshold_ = t;
  spec_.density_threshold = t;
  build_xc();  // libxc's own cut-off must follow, not only the mesh screening
}

KsProblem::~KsProblem() = default;
KsProblem::KsProblem(KsProblem&&) noexcept = default;

std::vector<ChannelStates> KsProblem::solve_channels(const std::vector<Eigen::VectorXd>& v_s,
                                                     std::vector<EigenWarmStart>& warm) const {
  const Mesh& m = *mesh_;
  const int nu = m.num_unknowns();
  const Eigen::VectorXd sqrt_w = m.w().array().sqrt();
  std::vector<ChannelStates> out(channels_.size());
  warm.resize(channels_.size());
  for (std::size_t c = 0; c < channels_.size(); ++c) {
    const Channel& ch = channels_[c];
    if (std::isnan(warm[c].lower_bound) && m.geometry() == Geometry::Radial) {
      // Bare-Coulomb 1s level minus a margin for exchange-correlation attraction.
      const double Z = spec_.atom.Z;
      warm[c].lower_bound = -0.5 * Z * Z - 2.0 * Z - 1.0;
    }
    const Eigen::VectorXd diag = v_s[ch.spin].segment(1, nu);
    const Eigenpairs ep = solvers_[ch.l].solve(diag, ch.states, warm[c]);
    ChannelStates st;
    st.energies = ep.values;
    st.orbitals = Eigen::MatrixXd::Zero(m.num_nodes(), ch.states);
    for (int i = 0; i < ch.states; ++i) {
      Eigen::VectorXd u = ep.vectors.col(i).array() / sqrt_w.segment(1, nu).array();
      // A deterministic sign: positive first lobe, so outputs do not flip between runs.
      int kmax = 0;
      u.cwiseAbs().maxCoeff(&kmax);
      for (int k = 0; k < nu; ++k)
        if (std::abs(u(k)) > 1e-3 * std::abs(u(kmax))) {
          if (u(k) < 0) u = -u;
          break;
        }
      st.orbitals.col(i).segment(1, nu) = u;
    }
    out[c] = std::move(st);
  }
  return out;
}

std::vector<Eigen::VectorXd> KsProblem::density(const std::vector<ChannelStates>& states) const {
  const Mesh& m = *mesh_;
  const int N = m.num_nodes();
  std::vector<Eigen::VectorXd> n(nspin(), Eigen::VectorXd::Zero(N));
  const bool radial = m.geometry() == Geometry::Radial;
  Eigen::MatrixXd D0;
  if (radial) D0 = m.element_derivative(0);
  for (std::size_t c = 0; c < channels_.size(); ++c) {
    const Channel& ch = channels_[c];
    for (std::size_t i = 0; i < ch.occupations.size(); ++i) {
      const double f = ch.occupations[i];
      if (f == 0.0) continue;
      const auto u = states[c].orbitals.col(static_cast<Eigen::Index>(i));
      if (radial) {
        for (int k = 1; k < N; ++k) {
          const double r = m.x()(k);
          n[ch.spin](k) += f * u(k) * u(k) / (4.0 * std::numbers::pi * r * r);
        }
        if (ch.l == 0) {
          const double du0 = D0.row(0).dot(u.segment(0, m.degree() + 1));
          n[ch.spin](0) += f * du0 * du0 / (4.0 * std::numbers::pi);
        }
      } else {
        n[ch.spin] += f * u.cwiseProduct(u);
      }
    }
  }
  return n;
}

Eigen::VectorXd KsProblem::hartree_potential(const Eigen::VectorXd& n_total) const {
  if (!hartree_) return Eigen::VectorXd::Zero(mesh_->num_nodes());
  return hartree_->potential(n_total);
}

std::vector<Eigen::VectorXd> KsProblem::initial_potential() const {
  Eigen::VectorXd v = v_ext_;
  if (mesh_->geometry() == Geometry::Radial) {
    // Screened nuclear attraction with Thomas–Fermi length b = 0.8853 Z^(-1/3): a start that
    // already puts the outer electrons in roughly the right place.
    const double Z = spec_.atom.Z;
    const double asym = spec_.charge + 1.0;
    const double b = 0.8853 * std::pow(Z, -1.0 / 3.0);
    for (int k = 1; k < mesh_->num_nodes(); ++k) {
      const double r = mesh_->x()(k);
      const double zeff = asym + (Z - asym) / std::pow(1.0 + r / b, 2.0);
      v(k) = -zeff / r;
    }
  }
  return std::vector<Eigen::VectorXd>(nspin(), v);
}

}  // namespace stillpoint
