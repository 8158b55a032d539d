#pragma once
// A system discretized on its mesh: everything the Kohn–Sham map needs, built once.
//
// Channels: the radial problem splits into (l, spin) channels, the line into spin channels.
// Each channel has fixed occupations of its lowest states (aufbau on the line, the
// configuration for atoms), which keeps the discrete map smooth for differentiation.
#include <Eigen/Dense>
#include <memory>
#include <string>
#include <vector>

#include "stillpoint/numerics/eigensolver.hpp"
#include "stillpoint/numerics/hartree.hpp"
#include "stillpoint/numerics/mesh.hpp"
#include "stillpoint/ks/system.hpp"
#include "stillpoint/xc/functional.hpp"

namespace stillpoint {

struct Channel {
  int l = 0;     ///< angular momentum (0 on the line)
  int spin = 0;  ///< 0 = up (majority for atoms), 1 = down; 0 only when unpolarized
  /// Occupation of the i-th lowest state (electrons, including the 2l+1 degeneracy and,
  /// unpolarized, both spins).
  std::vector<double> occupations;
  /// Number of states to compute (>= occupations.size()).
  int states = 1;
  /// Label of the i-th state, e.g. "2p" or "3".
  std::vector<std::string> labels;
};

struct ChannelStates {
  Eigen::VectorXd energies;  ///< hartree
  /// Nodal orbital values at every mesh node (column per state), normalized so that
  /// sum_k w_k u_k^2 = 1 (radial: u = r R).
  Eigen::MatrixXd orbitals;
};

class KsProblem {
 public:
  explicit KsProblem(const SystemSpec& spec);
  ~KsProblem();
  KsProblem(KsProblem&&) noexcept;

  const SystemSpec& spec() const { return spec_; }
  const Mesh& mesh() const { return *mesh_; }
  int nspin() const { return spec_.spin_polarized ? 2 : 1; }
  const std::vector<Channel>& channels() const { return channels_; }
  const XcFunctional& xc() const { return xc_; }
  XcFunctional& mutable_xc() { return xc_; }
  const Hartree* hartree() const { return hartree_.get(); }
  /// Scaled kinetic matrix of angular momentum l (interior unknowns; l = 0 on the line), the
  /// one the eigensolver of that l works with.
  const Eigen::SparseMatrix<double>& kinetic(int l) const { return kinetic_.at(l); }
  double density_threshold() const { return density_threshold_; }
  /// Rebuilds the functional so libxc's own cut-off follows too.
  void set_density_threshold(double t);

  /// External potential at every node (radial: -Z/r, node r = 0 set to 0; it carries no weight).
  const Eigen::VectorXd& external_potential() const { return v_ext_; }
  void set_external_potential(Eigen::VectorXd v) { v_ext_ = std::move(v); }
  /// Nucleus–nucleus repulsion (line; 0 for atoms).
  double nuclear_repulsion() const { return e_nn_; }
  double electron_count() const { return electrons_; }
  /// Electrons of spin `spin` (0 up, 1 down; unpolarized: spin 0 holds all), from the occupations.
  double spin_electrons(int spin) const { return spin_electrons_[spin]; }

  /// Solves every channel in the potentials v_s (one nodal vector per spin). `warm` holds
  /// each channel's eigensolver warm start (empty on the first call) and is updated.
  std::vector<ChannelStates> solve_channels(const std::vector<Eigen::VectorXd>& v_s, std::vector<EigenWarmStart>& warm) const;
  /// Spin densities from channel states with the fixed occupations.
  std::vector<Eigen::VectorXd> density(const std::vector<ChannelStates>& states) const;
  /// v_H[n] (zero when non-interacting).
  Eigen::VectorXd hartree_potential(const Eigen::VectorXd& n_total) const;
  /// A starting effective potential (screened nuclear attraction for atoms, v_ext on the line).
  std::vector<Eigen::VectorXd> initial_potential() const;

 private:
  void build_xc();

  SystemSpec spec_;
  std::shared_ptr<Mesh> mesh_;
  std::vector<Channel> channels_;
  std::vector<int> max_l_;
  std::vector<Eigen::SparseMatrix<double>> kinetic_;  // one per l
  std::vector<LowestEigensolver> solvers_;            // one per l
  std::unique_ptr<Hartree> hartree_;
  XcFunctional xc_;
  Eigen::VectorXd v_ext_;
  double e_nn_ = 0.0;
  double electrons_ = 0.0;
  double spin_electrons_[2] = {0.0, 0.0};
  double density_threshold_ = 1e-30;
};

}  // namespace stillpoint
