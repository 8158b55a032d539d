// The fit checkpoint's record checksums: no damaged byte may resume into a different fit.
#include <gtest/gtest.h>

#include <string>

#include "../src/fit/checkpoint.hpp"
#include "stillpoint/common/errors.hpp"

namespace sp = stillpoint;

namespace {

sp::FitCheckpointState small_state() {
  sp::FitCheckpointState st;
  st.fingerprint = 0x0123456789abcdefull;
  st.seconds_before = 1.5;
  st.complete = true;
  sp::FitLogEntry e;
  e.type = sp::FitLogEntry::Type::ResidualJacobian;
  e.ok = true;
  e.theta = Eigen::Vector2d(0.25, -1.0);
  e.loss = 0.125;
  e.gradient = Eigen::Vector2d(1e-3, 2e-3);
  e.residuals = Eigen::Vector3d(0.1, 0.2, 0.3);
  e.jacobian = Eigen::MatrixXd::Constant(3, 2, 0.5);
  e.reason = "";
  st.log = {e, e};
  st.log[1].ok = false;
  st.log[1].reason = "no convergence";
  sp::FitIteration it;
  it.iteration = 1;
  it.loss = 0.125;
  it.gradient_norm = 1e-3;
  it.step_successful = true;
  st.iterations = {it};
  st.rejected = {"theta = (1, 2)"};
  sp::KsSolution s;
  s.v_s = {Eigen::Vector3d(-1.0, -2.0, -1.0)};
  sp::EigenWarmStart w;
  w.lower_bound = -3.0;
  w.previous.values = Eigen::Vector2d(-2.0, -0.5);
  w.previous.vectors = Eigen::MatrixXd::Identity(3, 2);
  s.warm = {w};
  st.train_states = {s};
  st.valid_states = {};
  return st;
}

}  // namespace

TEST(FitCheckpoint, RoundTripsBitForBit) {
  const std::string bytes = sp::serialize_checkpoint(small_state());
  const sp::FitCheckpointState back = sp::parse_checkpoint(bytes, "ck.bin");
  EXPECT_EQ(sp::serialize_checkpoint(back), bytes);
}

TEST(FitCheckpoint, EveryChangedByteIsRefusedAsDamaged) {
  const std::string good = sp::serialize_checkpoint(small_state());
  const std::size_t magic = std::string("STILLPOINT-FIT-CHECKPOINT 2\n").size();
  for (const unsigned char flip : {0x01u, 0x80u, 0xFFu}) {
    for (std::size_t i = 0; i < good.size(); ++i) {
      std::string bad = good;
      bad[i] = static_cast<char>(static_cast<unsigned char>(bad[i]) ^ flip);
      try {
        sp::parse_checkpoint(bad, "ck.bin");
        ADD_FAILURE() << "byte " << i << " ^ " << int(flip) << " was accepted";
      } catch (const sp::InputError& e) {
        const std::string w = e.what();
        EXPECT_NE(w.find("ck.bin"), std::string::npos) << w;
        if (i >= magic) {
          EXPECT_NE(w.find("damaged checkpoint: record "), std::string::npos) << "byte " << i << ": " << w;
        }
      }
    }
  }
  // Cut short anywhere: refused too.
  for (std::size_t n = 0; n < good.size(); ++n) EXPECT_THROW(sp::parse_checkpoint(good.substr(0, n), "ck.bin"), sp::InputError) << n;
}
