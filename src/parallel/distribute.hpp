#pragma once
// Internal: independent items computed across the ranks of a Communicator (and the threads of
// each rank), with every item's result made available on every rank.
//
// Each item is computed entirely by one thread of one rank; `pack(i)` encodes its result there
// and `unpack(i, bytes)` installs it on every other rank, bit for bit. A failed item travels as
// its error (kind, message, details), so every rank rethrows the same error and the run stops
// the same way as a serial one, never with one rank waiting for another.
//
// `cost` (seconds, one per item) decides the assignment (assign_by_cost) and is updated with
// the measured time of every item, so the next call balances by what items really took.
#include <chrono>
#include <exception>
#include <stdexcept>
#include <utility>
#include <string>
#include <vector>

#include "common/bytes.hpp"
#include "common/threads.hpp"
#include "stillpoint/parallel/communicator.hpp"

namespace stillpoint::detail {

void write_error(ByteWriter& w, const std::exception_ptr& e);
std::exception_ptr read_error(ByteReader& r);
/// A reader of messages between ranks: damage there is a bug or a broken network, not input.
ByteReader message_reader(const std::string& bytes);

// `stop_at_first_error`: each rank works through its share in item order with one thread and
// stops at its first failure, so the first failing item overall (the one a serial run stops at)
// is always computed and reported, and a serial run does no work after it.
//
// distributed_for_owned takes the owner of every item instead (for a second pass over items
// that must stay where the first pass left their data); `cost` still receives the times.
template <class Body, class Pack, class Unpack>
std::vector<std::exception_ptr> distributed_for_owned(const Communicator& comm, int count, int threads,
                                                      const std::vector<int>& owner, std::vector<double>& cost,
                                                      Body&& body, Pack&& pack, Unpack&& unpack,
                                                      bool stop_at_first_error = false) {
  cost.resize(static_cast<std::size_t>(std::max(count, 0)), 1.0);
  if (static_cast<int>(owner.size()) != count) throw std::logic_error("distributed_for_owned: one owner per item");
  std::vector<int> mine;
  for (int i = 0; i < count; ++i)
    if (owner[i] == comm.rank()) mine.push_back(i);
  std::vector<double> seconds(mine.size(), 0.0);
  bool failed = false;
  const auto local = parallel_for(static_cast<int>(mine.size()), stop_at_first_error ? 1 : threads, [&](int k) {
    if (failed) {
      mine[k] = -1;  // not computed; nothing is sent for it
      return;
    }
    const auto t0 = std::chrono::steady_clock::now();
    try {
      body(mine[k]);
    } catch (...) {
      seconds[k] = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
      failed = stop_at_first_error;
      throw;
    }
    seconds[k] = std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count();
  });
  std::vector<std::exception_ptr> errors(static_cast<std::size_t>(std::max(count, 0)));
  std::size_t sent = 0;
  for (std::size_t k = 0; k < mine.size(); ++k) {
    if (mine[k] < 0) continue;
    errors[mine[k]] = local[k];
    cost[mine[k]] = seconds[k];
    ++sent;
  }
  if (comm.size() == 1) return errors;

  ByteWriter w;
  w.u64(sent);
  for (std::size_t k = 0; k < mine.size(); ++k) {
    if (mine[k] < 0) continue;
    w.u64(static_cast<std::uint64_t>(mine[k]));
    w.f64(seconds[k]);
    w.u8(local[k] ? 0 : 1);
    if (local[k])
      write_error(w, local[k]);
    else
      w.str(pack(mine[k]));
  }
  const std::vector<std::string> all = comm.all_gather(w.take());
  for (int r = 0; r < comm.size(); ++r) {
    if (r == comm.rank()) continue;
    ByteReader in = message_reader(all[r]);
    const std::size_t n = in.count(17);
    for (std::size_t k = 0; k < n; ++k) {
      const auto i = static_cast<int>(in.u64());
      if (i < 0 || i >= count || owner[i] != r) throw std::logic_error("distributed_for: rank " + std::to_string(r) + " sent item " + std::to_string(i));
      cost[i] = in.f64();
      if (in.u8())
        unpack(i, in.str());
      else
        errors[i] = read_error(in);
    }
  }
  return errors;
}

template <class Body, class Pack, class Unpack>
std::vector<std::exception_ptr> distributed_for(const Communicator& comm, int count, int threads, std::vector<double>& cost,
                                                Body&& body, Pack&& pack, Unpack&& unpack,
                                                bool stop_at_first_error = false) {
  cost.resize(static_cast<std::size_t>(std::max(count, 0)), 1.0);
  const std::vector<int> owner = assign_by_cost(cost, comm.size());
  return distributed_for_owned(comm, count, threads, owner, cost, std::forward<Body>(body), std::forward<Pack>(pack),
                               std::forward<Unpack>(unpack), stop_at_first_error);
}

}  // namespace stillpoint::detail
