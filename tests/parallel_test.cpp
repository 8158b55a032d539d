// Work shared over ranks gives every rank the serial numbers, bit for bit. The ranks here are
// threads of this process behind the same Communicator interface the MPI build implements, so
// these checks run without mpirun; tests/mpi/mpi_checks.sh repeats them under Open MPI.
#include <gtest/gtest.h>

#include <barrier>
#include <cstring>
#include <functional>
#include <random>
#include <thread>

#include "parallel/distribute.hpp"
#include "parallel/transport.hpp"
#include "stillpoint/check/reference_check.hpp"
#include "stillpoint/common/errors.hpp"
#include "stillpoint/ks/report.hpp"
#include "stillpoint/parallel/communicator.hpp"
#include "stillpoint/response/input.hpp"

namespace sp = stillpoint;

namespace {

// K ranks as K threads: all_gather through shared slots between two barriers.
class ThreadRanks {
 public:
  explicit ThreadRanks(int k) : slots_(static_cast<std::size_t>(k)), sync_(k) {
    for (int r = 0; r < k; ++r) ranks_.emplace_back(new Rank(*this, r));
  }
  const sp::Communicator& rank(int r) const { return *ranks_[r]; }
  int size() const { return static_cast<int>(ranks_.size()); }
  /// Runs body(rank) on every rank at once.
  void run(const std::function<void(const sp::Communicator&)>& body) {
    std::vector<std::thread> t;
    for (int r = 0; r < size(); ++r) t.emplace_back([&, r] { body(rank(r)); });
    for (auto& x : t) x.join();
  }

 private:
  struct Rank final : sp::Communicator {
    Rank(ThreadRanks& o, int r) : owner(o), me(r) {}
    int rank() const override { return me; }
    int size() const override { return owner.size(); }
    std::vector<std::string> all_gather(const std::string& mine) const override {
      owner.slots_[me] = mine;
      owner.sync_.arrive_and_wait();
      std::vector<std::string> all = owner.slots_;
      owner.sync_.arrive_and_wait();
      return all;
    }
    ThreadRanks& owner;
    int me;
  };
  std::vector<std::string> slots_;
  std::barrier<> sync_;
  std::vector<std::unique_ptr<Rank>> ranks_;
};

bool same_bits(const Eigen::MatrixXd& a, const Eigen::MatrixXd& b) {
  return a.rows() == b.rows() && a.cols() == b.cols() &&
         std::memcmp(a.data(), b.data(), sizeof(double) * static_cast<std::size_t>(a.size())) == 0;
}

// Optimal makespan by enumeration (small instances only).
double optimal_makespan(const std::vector<double>& cost, int ranks) {
  double best = 1e300;
  std::vector<int> a(cost.size(), 0);
  for (;;) {
    std::vector<double> load(static_cast<std::size_t>(ranks), 0.0);
    for (std::size_t i = 0; i < cost.size(); ++i) load[a[i]] += cost[i];
    best = std::min(best, *std::max_element(load.begin(), load.end()));
    std::size_t i = 0;
    while (i < a.size() && ++a[i] == ranks) a[i++] = 0;
    if (i == a.size()) return best;
  }
}

}  // namespace

// Graham's bound for longest-processing-time-first scheduling (R. L. Graham, SIAM J. Appl.
// Math. 17, 416 (1969)): makespan <= (4/3 - 1/(3m)) x optimum on m machines.
TEST(Parallel, CostAssignmentMeetsGrahamsBound) {
  std::mt19937 rng(7);
  std::uniform_real_distribution<double> u(0.1, 10.0);
  for (int m = 2; m <= 3; ++m)
    for (int trial = 0; trial < 30; ++trial) {
      std::vector<double> c(8);
      for (double& x : c) x = u(rng);
      const std::vector<int> owner = sp::assign_by_cost(c, m);
      std::vector<double> load(static_cast<std::size_t>(m), 0.0);
      for (std::size_t i = 0; i < c.size(); ++i) load[owner[i]] += c[i];
      const double makespan = *std::max_element(load.begin(), load.end());
      EXPECT_LE(makespan, (4.0 / 3.0 - 1.0 / (3.0 * m)) * optimal_makespan(c, m) * (1 + 1e-12));
    }
  // A hand-worked case: 7, 6, 5, 4, 3 on two ranks -> {7, 4, 3} and {6, 5}, efficiency 25 / 28.
  EXPECT_EQ(sp::assign_by_cost({7, 6, 5, 4, 3}, 2), (std::vector<int>{0, 1, 1, 0, 0}));
  EXPECT_NEAR(sp::assignment_efficiency({7, 6, 5, 4, 3}, 2), 25.0 / 28.0, 1e-15);
  EXPECT_EQ(sp::assignment_efficiency({1, 1, 1, 1}, 4), 1.0);
}

TEST(Parallel, SolutionRoundTripIsExact) {
  sp::SolveInput in = sp::read_solve_input(std::string(STILLPOINT_SOURCE_DIR) + "/workflows/solve-atoms-gga.toml");
  const sp::KsProblem P(in.systems.back());
  const sp::KsSolution S = sp::solve_scf(P, in.scf);
  const sp::KsSolution R = sp::detail::unpack_solution(sp::detail::pack_solution(S));
  EXPECT_EQ(sp::format_solution(P, S), sp::format_solution(P, R));
  EXPECT_EQ(sp::solution_json(P, S), sp::solution_json(P, R));
  ASSERT_EQ(R.warm.size(), S.warm.size());
  for (std::size_t c = 0; c < S.warm.size(); ++c) {
    EXPECT_TRUE(same_bits(S.warm[c].previous.vectors, R.warm[c].previous.vectors));
    EXPECT_TRUE(same_bits(S.states[c].orbitals, R.states[c].orbitals));
  }
  // A warm start from the copy takes the same path as one from the original.
  const sp::KsSolution a = sp::solve_scf(P, in.scf, &S), b = sp::solve_scf(P, in.scf, &R);
  EXPECT_EQ(a.iterations, b.iterations);
  EXPECT_EQ(a.energy.total, b.energy.total);
  EXPECT_THROW(sp::detail::unpack_solution(sp::detail::pack_solution(S).substr(0, 100)), std::logic_error);
}

TEST(Parallel, ErrorsTravelWithKindLocationAndDetails) {
  std::vector<double> cost = {2.0, 1.0, 1.0};
  std::vector<std::exception_ptr> seen[2];
  ThreadRanks ranks(2);
  ranks.run([&](const sp::Communicator& c) {
    std::vector<double> my_cost = cost;
    seen[c.rank()] = sp::detail::distributed_for(
        c, 3, 1, my_cost,
        [](int i) {
          if (i == 1) throw sp::InputError(sp::SourceLocation{"f.toml", 3, 4, "system[1].xc"}, "bad");
          if (i == 2) throw sp::NumericalError("no convergence", {"iter 1", "iter 2"});
        },
        [](int) { return std::string(); }, [](int, const std::string&) {});
  });
  for (auto& errors : seen) {
    ASSERT_EQ(errors.size(), 3u);
    EXPECT_FALSE(errors[0]);
    try {
      std::rethrow_exception(errors[1]);
    } catch (const sp::InputError& e) {
      EXPECT_STREQ(e.what(), "f.toml:3:4: key 'system[1].xc': bad");
      EXPECT_EQ(e.where().key, "system[1].xc");
    }
    try {
      std::rethrow_exception(errors[2]);
    } catch (const sp::NumericalError& e) {
      EXPECT_STREQ(e.what(), "no convergence");
      EXPECT_EQ(e.details(), (std::vector<std::string>{"iter 1", "iter 2"}));
    }
  }
}

// Gradients (adjoint and tangent), residual Jacobians and the finite-difference check on two
// and three ranks equal the serial results bit for bit, on every rank.
TEST(Parallel, GradientsOnRanksEqualSerialBitForBit) {
  const std::string root = STILLPOINT_SOURCE_DIR;
  for (const char* file : {"/workflows/fit-atoms-xalpha.toml", "/workflows/fit-1d-correlation.toml"}) {
    const sp::GradInput in = sp::read_grad_input(root + file);
    for (auto mode : {sp::GradientOptions::Mode::Adjoint, sp::GradientOptions::Mode::Tangent}) {
      sp::GradientOptions o = in.options;
      o.mode = mode;
      sp::GradientProblem serial(in.base.systems, in.parameters, in.loss, o);
      const Eigen::VectorXd theta = serial.initial_values();
      const sp::GradientResult g0 = serial.evaluate(theta);
      const bool residual = serial.residual_form();
      const sp::ResidualResult r0 = residual ? serial.residuals(theta, true) : sp::ResidualResult{};
      for (int k : {2, 3}) {
        ThreadRanks ranks(k);
        std::vector<sp::GradientResult> g(static_cast<std::size_t>(k));
        std::vector<sp::ResidualResult> r(static_cast<std::size_t>(k));
        ranks.run([&](const sp::Communicator& c) {
          sp::GradientOptions oc = o;
          oc.communicator = &c;
          sp::GradientProblem G(in.base.systems, in.parameters, in.loss, oc);
          g[c.rank()] = G.evaluate(theta);
          if (residual) r[c.rank()] = G.residuals(theta, true);
        });
        for (int q = 0; q < k; ++q) {
          SCOPED_TRACE(std::string(file) + " ranks " + std::to_string(k) + " rank " + std::to_string(q));
          EXPECT_EQ(g[q].loss, g0.loss);
          EXPECT_TRUE(same_bits(g[q].gradient, g0.gradient));
          EXPECT_EQ(g[q].linear_solves, g0.linear_solves);
          EXPECT_EQ(g[q].krylov_iterations, g0.krylov_iterations);
          if (residual) {
            EXPECT_TRUE(same_bits(r[q].residuals, r0.residuals));
            EXPECT_TRUE(same_bits(r[q].jacobian, r0.jacobian));
          }
        }
      }
    }
  }
}

TEST(Parallel, FiniteDifferenceComponentsOnRanksEqualSerial) {
  const sp::GradInput in = sp::read_grad_input(std::string(STILLPOINT_SOURCE_DIR) + "/workflows/grad-1d-helium.toml");
  sp::ScfOptions tight = in.options.scf;
  tight.potential_tolerance = 1e-12;
  sp::GradientProblem serial(in.base.systems, in.parameters, in.loss, in.options);
  const Eigen::VectorXd theta = serial.initial_values();
  const Eigen::VectorXd steps = sp::default_fd_steps(in.parameters, theta, in.verify_step);
  const Eigen::VectorXd fd0 = serial.finite_difference_gradient(theta, steps, tight, {});
  ThreadRanks ranks(2);
  std::vector<Eigen::VectorXd> fd(2);
  ranks.run([&](const sp::Communicator& c) {
    sp::GradientOptions oc = in.options;
    oc.communicator = &c;
    sp::GradientProblem G(in.base.systems, in.parameters, in.loss, oc);
    fd[c.rank()] = G.finite_difference_gradient(theta, steps, tight, {});
  });
  EXPECT_TRUE(same_bits(fd[0], fd0));
  EXPECT_TRUE(same_bits(fd[1], fd0));
}

// The NIST rows checked on two ranks: the same report as a serial check.
TEST(Parallel, ReferenceCheckOnRanksEqualsSerial) {
  const auto rows = sp::read_reference_table(std::string(STILLPOINT_SOURCE_DIR) + "/basis-data/reference/nist-lda-lsd.csv");
  const sp::CheckReport s = sp::run_reference_check(rows, {});
  ThreadRanks ranks(2);
  std::vector<sp::CheckReport> rep(2);
  ranks.run([&](const sp::Communicator& c) {
    sp::CheckOptions o;
    o.communicator = &c;
    rep[c.rank()] = sp::run_reference_check(rows, o);
  });
  for (const auto& r : rep) {
    ASSERT_EQ(r.results.size(), s.results.size());
    for (std::size_t i = 0; i < s.results.size(); ++i) EXPECT_EQ(r.results[i].computed, s.results[i].computed) << i;
    EXPECT_EQ(r.n_failed, s.n_failed);
  }
}
