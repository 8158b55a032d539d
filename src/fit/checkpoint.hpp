#pragma once
// Internal: the fit's evaluation log and its checkpoint file.
//
// A checkpoint holds every evaluation Ceres asked for (point, success, loss, gradient or
// residuals and Jacobian, bit for bit), every iteration record, the rejected points, and the
// warm-start state of every system. Resuming replays the log to Ceres, which therefore takes
// exactly the same path, restores the warm starts, and continues: the result equals that of
// an uninterrupted run.
//
// File layout (little-endian, the machine's IEEE doubles): "STILLPOINT-FIT-CHECKPOINT 2\n",
// then records, each followed by the CRC-32 (IEEE polynomial) of its bytes: the header
// (u64 fingerprint, f64 seconds, u8 complete, u64 log size), one per log entry, the iteration
// records and rejected points, and per state list its size and one per state. A record
// whose checksum fails is reported as a damaged checkpoint with its number.
#include <Eigen/Dense>
#include <cstdint>
#include <string>
#include <vector>

#include "stillpoint/fit/fit.hpp"

namespace stillpoint {

struct FitLogEntry {
  enum class Type : std::uint8_t { Gradient = 0, Residual = 1, ResidualJacobian = 2 };
  Type type = Type::Gradient;
  bool ok = false;
  Eigen::VectorXd theta;
  double loss = 0.0;
  Eigen::VectorXd gradient;   ///< dL/dtheta (Gradient, ResidualJacobian)
  Eigen::VectorXd residuals;  ///< Residual*, including regularization rows
  Eigen::MatrixXd jacobian;   ///< ResidualJacobian
  std::string reason;         ///< why a failed point failed
};

struct FitCheckpointState {
  std::uint64_t fingerprint = 0;
  double seconds_before = 0.0;
  bool complete = false;
  std::vector<FitLogEntry> log;
  std::vector<FitIteration> iterations;
  std::vector<std::string> rejected;
  std::vector<KsSolution> train_states, valid_states;  ///< only v_s and warm are stored
};

std::string serialize_checkpoint(const FitCheckpointState& state);
/// InputError naming the file when it is not a checkpoint, is truncated, or a record fails
/// its checksum ("damaged checkpoint: record N ...").
FitCheckpointState parse_checkpoint(const std::string& bytes, const std::string& file);

/// Hash of everything that determines the optimizer's path (systems, parameters and start,
/// loss terms and references, optimizer, tolerances, SCF and response settings) but not of
/// what may change between runs (iteration limit, thread count, checkpoint interval).
std::uint64_t fit_fingerprint(const FitSpec& spec);

}  // namespace stillpoint
