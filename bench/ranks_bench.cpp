// Scale-out model for MPI (issue-14 figures): the measured cost of every system of the 64-system
// training set (bench/mpi-training-set.toml), and from these costs the parallel efficiency at K
// ranks of one gradient evaluation: the cost-balanced assignment (assign_by_cost), the work every
// rank repeats (encoding and decoding every converged solution), and one all-gather of them per
// evaluation. bench/mpi_scaling.sh measures K = 1 and 2 under mpirun.
#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <string>
#include <vector>

#include "parallel/transport.hpp"
#include "stillpoint/parallel/communicator.hpp"
#include "stillpoint/response/input.hpp"

namespace sp = stillpoint;

namespace {

double since(std::chrono::steady_clock::time_point t0) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
}

}  // namespace

void ranks_report() {
  const std::string file = std::string(STILLPOINT_BENCH_SOURCE) + "/bench/mpi-training-set.toml";
  const sp::GradInput in = sp::read_grad_input(file);
  const std::size_t n = in.base.systems.size();
  std::vector<double> cost(n), setup(n), codec(n);
  double bytes = 0.0;
  for (std::size_t s = 0; s < n; ++s) {
    // Best of three cold solves: the cost a rank pays for this system in the first evaluation.
    double best = 1e300, best_setup = 1e300;
    for (int rep = 0; rep < 3; ++rep) {
      auto t0 = std::chrono::steady_clock::now();
      sp::KsProblem P(in.base.systems[s]);
      best_setup = std::min(best_setup, since(t0));
      t0 = std::chrono::steady_clock::now();
      const sp::KsSolution S = sp::solve_scf(P, in.options.scf);
      best = std::min(best, since(t0));
      if (rep == 0) {
        t0 = std::chrono::steady_clock::now();
        const std::string packed = sp::detail::pack_solution(S);
        const sp::KsSolution back = sp::detail::unpack_solution(packed);
        codec[s] = since(t0);
        bytes += static_cast<double>(packed.size()) + 0.0 * back.iterations;
      }
    }
    cost[s] = best;
    setup[s] = best_setup;
  }
  double total = 0.0, total_setup = 0.0, total_codec = 0.0;
  std::size_t largest = 0;
  for (std::size_t s = 0; s < n; ++s) {
    total += cost[s];
    total_setup += setup[s];
    total_codec += codec[s];
    if (cost[s] > cost[largest]) largest = s;
  }
  std::printf("\nRanks: %zu-system training set (bench/mpi-training-set.toml), cold SCFs measured in this process\n", n);
  std::printf("  SCF work %.3f s in all (discretizations %.1f ms of it); largest %s %.1f ms (%.1f%% of the total);\n"
              "  converged solutions %.2f MB per all-gather, encoded and decoded in %.2f ms\n",
              total + total_setup, 1e3 * total_setup, in.base.systems[largest].name.c_str(), 1e3 * cost[largest],
              100.0 * cost[largest] / total, bytes / 1e6, 1e3 * total_codec);
  for (std::size_t s = 0; s < n; ++s) cost[s] += setup[s];  // a rank builds the systems it solves
  total += total_setup;
  // Ring all-gather (Hockney model): (K-1) latencies plus (K-1)/K of the bytes at the link rate.
  // The link figures are assumptions of a common cluster interconnect, not measurements.
  const double latency = 2e-6, bandwidth = 5e9;
  std::printf("  modeled efficiency E(K) = work / (K x (largest rank load + decoding every solution + all-gather)),\n"
              "  loads from the cost-balanced assignment of the measured costs; all-gather at %.0f us latency and\n"
              "  %.0f GB/s (assumed interconnect):\n",
              1e6 * latency, bandwidth / 1e9);
  std::printf("  %6s %12s %14s %12s %10s\n", "K", "balance", "load (ms)", "comm (ms)", "E(K)");
  for (int K : {1, 2, 4, 16, 64, 256}) {
    const double balance = sp::assignment_efficiency(cost, K);
    const double load = total / (K * balance);
    const double repeated = K > 1 ? total_codec : 0.0;
    const double comm = K > 1 ? (K - 1) * latency + (K - 1.0) / K * bytes / bandwidth : 0.0;
    const double eff = total / (K * (load + repeated + comm));
    std::printf("  %6d %12.3f %14.2f %12.3f %10.3f\n", K, balance, 1e3 * load, 1e3 * comm, eff);
  }
  std::printf("  beyond K = %zu ranks a rank holds at most one system and the largest (%s) bounds the time:\n"
              "  E <= work / (K x its cost) = %.3f at K = 64, %.3f at K = 256\n",
              n, in.base.systems[largest].name.c_str(), total / (64 * cost[largest]), total / (256 * cost[largest]));
}
