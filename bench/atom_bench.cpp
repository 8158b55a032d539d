// Atom costs (issue-12 figures): cold SCFs of H to Xe, and the adjoint gradient of an atom
// against its SCF for a few xc weights and for a potential on every grid node, with the cost of
// central differences (2 SCFs per parameter) for comparison. Ratios from one run.
#include <benchmark/benchmark.h>

#include <chrono>
#include <cstdio>
#include <string>
#include <vector>

#include "stillpoint/ks/atom_config.hpp"
#include "stillpoint/ks/grid_presets.hpp"
#include "stillpoint/ks/scf.hpp"
#include "stillpoint/response/gradient.hpp"

namespace sp = stillpoint;

namespace {

double since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

sp::SystemSpec lda_atom(int Z) {
  sp::SystemSpec s;
  s.name = sp::element_symbol(Z);
  s.geometry = sp::Geometry::Radial;
  s.atom.Z = Z;
  s.atom.configuration = sp::parse_configuration(sp::default_configuration(Z, 0));
  s.xc = {"lda_x", "lda_c_vwn"};
  s.grid = sp::grid_preset(sp::Geometry::Radial, "default");
  return s;
}

// Median-free but repeated: at least `min_reps` runs and 0.3 s.
template <class F>
double per_run(F&& f, int min_reps = 3) {
  int reps = 0;
  const auto t0 = std::chrono::steady_clock::now();
  while (since(t0) < 0.3 || reps < min_reps) {
    f();
    ++reps;
  }
  return since(t0) / reps;
}

}  // namespace

void atom_report() {
  std::printf("\nCold SCF of closed-shell and open-shell atoms, LDA (Slater + VWN5), default grid, one thread:\n");
  double t_ne = 0.0;
  for (int Z : {1, 10, 18, 36, 54}) {
    const sp::KsProblem P(lda_atom(Z));
    int its = 0;
    const double t = per_run([&] { its = sp::solve_scf(P).iterations; });
    if (Z == 10) t_ne = t;
    std::printf("  %-2s %4d nodes: %8.2f ms (%d iterations)\n", sp::element_symbol(Z).c_str(), P.mesh().num_nodes(), 1e3 * t,
                its);
  }
  // Gradient of the Ne total energy's error against a target, and of a density distance.
  const sp::SystemSpec ne = lda_atom(10);
  const sp::KsProblem P(ne);
  const sp::KsSolution ref = sp::solve_scf(P);
  sp::LossTerm e;
  e.kind = sp::LossTerm::Kind::Eigenvalue;
  e.state = "2p";
  e.target = ref.levels.back().energy + 0.01;
  sp::LossTerm d;
  d.kind = sp::LossTerm::Kind::Density;
  const Eigen::VectorXd nr = ref.total_density() * 1.001;
  d.reference.assign(nr.data(), nr.data() + nr.size());
  const int N = P.mesh().num_nodes();
  auto report = [&](const char* what, const std::vector<sp::ParameterRef>& ps, const std::vector<sp::LossTerm>& loss,
                    bool with_fd) {
    sp::GradientProblem G({ne}, ps, loss);
    const Eigen::VectorXd th = G.initial_values();
    G.evaluate(th);  // warm states, as inside a fit
    double tg = 0.0;
    int reps = 0, solves = 0;
    const auto t0 = std::chrono::steady_clock::now();
    while (since(t0) < 0.5 || reps < 3) {
      const auto r = G.evaluate(th);
      tg += r.gradient_seconds;
      solves = r.linear_solves;
      ++reps;
    }
    tg /= reps;
    std::printf("  %-34s %4zu parameters: gradient %8.2f ms = %.3f x cold SCF (%d linear solves)\n", what, ps.size(), 1e3 * tg,
                tg / t_ne, solves);
    if (with_fd) {
      // Central differences as a user would run them: 2 warm-started SCFs per parameter. Timed
      // on 20 parameters and scaled to all of them.
      sp::ScfOptions o;
      const int sample = std::min<int>(20, static_cast<int>(ps.size()));
      const auto t1 = std::chrono::steady_clock::now();
      for (int p = 0; p < sample; ++p) {
        Eigen::VectorXd a = th, b = th;
        a(p) += 1e-3;
        b(p) -= 1e-3;
        benchmark::DoNotOptimize(G.loss(a, &o) - G.loss(b, &o));
      }
      const double t_fd = since(t1) / sample * static_cast<double>(ps.size());
      std::printf("    2N SCFs (central differences, %d timed and scaled to N = %zu) / (cold SCF + gradient) = %.0f"
                  " (the limit is 2N = %zu)\n",
                  sample, ps.size(), t_fd / (t_ne + tg), 2 * ps.size());
    }
  };
  std::vector<sp::ParameterRef> weights;
  for (int i = 0; i < 2; ++i) {
    sp::ParameterRef r;
    r.kind = sp::ParameterRef::Kind::XcWeight;
    r.index = i;
    r.name = i == 0 ? "w_x" : "w_c";
    weights.push_back(r);
  }
  report("Ne, eigenvalue loss, xc weights", weights, {e}, false);
  std::vector<sp::ParameterRef> grid;
  for (int k = 1; k < N - 1; ++k) {
    sp::ParameterRef r;
    r.kind = sp::ParameterRef::Kind::GridPotential;
    r.index = k;
    r.name = std::string("v").append(std::to_string(k));
    grid.push_back(r);
  }
  report("Ne, density loss, grid potential", grid, {d}, true);
}
