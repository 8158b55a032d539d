#include <mpi.h>
#include <unistd.h>

#include <algorithm>
#include <chrono>
#include <climits>
#include <cstdlib>
#include <stdexcept>
#include <thread>
#include <vector>

#include "stillpoint/parallel/mpi.hpp"

namespace stillpoint {

namespace {

void check(int rc, const char* what) {
  if (rc != MPI_SUCCESS) throw std::runtime_error(std::string("MPI call failed: ") + what);
}

class WorldCommunicator final : public Communicator {
 public:
  explicit WorldCommunicator(MPI_Comm comm) : comm_(comm) {
    check(MPI_Comm_rank(comm_, &rank_), "MPI_Comm_rank");
    check(MPI_Comm_size(comm_, &size_), "MPI_Comm_size");
  }
  int rank() const override { return rank_; }
  int size() const override { return size_; }

  std::vector<std::string> all_gather(const std::string& mine) const override {
    // Sizes first (64 bit), then the bytes in pieces that fit MPI's int counts.
    const long long n = static_cast<long long>(mine.size());
    std::vector<long long> sizes(static_cast<std::size_t>(size_));
    check(MPI_Allgather(&n, 1, MPI_LONG_LONG, sizes.data(), 1, MPI_LONG_LONG, comm_), "MPI_Allgather (sizes)");
    std::vector<std::string> out(static_cast<std::size_t>(size_));
    for (int r = 0; r < size_; ++r) out[r].resize(static_cast<std::size_t>(sizes[r]));
    const long long piece = INT_MAX / 2;
    long long most = 0;
    for (long long s : sizes) most = std::max(most, s);
    for (long long off = 0; off < most; off += piece) {
      std::vector<int> counts(static_cast<std::size_t>(size_)), displs(static_cast<std::size_t>(size_));
      long long total = 0;
      for (int r = 0; r < size_; ++r) {
        counts[r] = static_cast<int>(std::clamp(sizes[r] - off, 0LL, piece));
        total += counts[r];
      }
      if (total > INT_MAX) throw std::runtime_error("MPI message too large for one gather");
      int at = 0;
      for (int r = 0; r < size_; ++r) {
        displs[r] = at;
        at += counts[r];
      }
      std::vector<char> buf(static_cast<std::size_t>(total));
      const int mine_count = static_cast<int>(std::clamp(n - off, 0LL, piece));
      check(MPI_Allgatherv(mine.data() + std::min(off, n), mine_count, MPI_CHAR, buf.data(), counts.data(),
                           displs.data(), MPI_CHAR, comm_),
            "MPI_Allgatherv");
      for (int r = 0; r < size_; ++r)
        if (counts[r]) std::copy(buf.begin() + displs[r], buf.begin() + displs[r] + counts[r], out[r].begin() + off);
    }
    return out;
  }

 private:
  MPI_Comm comm_;
  int rank_ = 0, size_ = 1;
};

}  // namespace

struct MpiSession::Impl {
  MPI_Comm exit_comm = MPI_COMM_NULL;  // separate, so the exit agreement never meets work messages
  std::unique_ptr<WorldCommunicator> world;
};

MpiSession::MpiSession(int& argc, char**& argv) {
  if (!std::getenv("OMPI_COMM_WORLD_SIZE")) return;
  int provided = 0;
  check(MPI_Init_thread(&argc, &argv, MPI_THREAD_FUNNELED, &provided), "MPI_Init_thread");
  active_ = true;
  impl_ = std::make_unique<Impl>();
  check(MPI_Comm_dup(MPI_COMM_WORLD, &impl_->exit_comm), "MPI_Comm_dup");
  impl_->world = std::make_unique<WorldCommunicator>(MPI_COMM_WORLD);
}

MpiSession::~MpiSession() {
  if (!active_) return;
  int finalized = 0;
  MPI_Finalized(&finalized);
  if (!finalized) {
    MPI_Comm_free(&impl_->exit_comm);
    MPI_Finalize();
  }
}

const Communicator& MpiSession::world() const {
  if (!active_) return serial_communicator();
  return *impl_->world;
}

int MpiSession::finish(int code, const std::string& message, int err_fd, double timeout_seconds) {
  auto say = [&](const std::string& text) {
    if (text.empty()) return;
    const char* p = text.data();
    std::size_t left = text.size();
    while (left > 0) {
      const ssize_t k = ::write(err_fd, p, left);
      if (k <= 0) break;
      p += k;
      left -= static_cast<std::size_t>(k);
    }
  };
  if (!active_) {
    say(message);
    return code;
  }
  const int size = impl_->world->size(), rank = impl_->world->rank();
  std::vector<int> codes(static_cast<std::size_t>(size), 0);
  MPI_Request req;
  MPI_Iallgather(&code, 1, MPI_INT, codes.data(), 1, MPI_INT, impl_->exit_comm, &req);
  const auto t0 = std::chrono::steady_clock::now();
  for (int done = 0;;) {
    MPI_Test(&req, &done, MPI_STATUS_IGNORE);
    if (done) break;
    // Ranks without an error wait as long as the others compute; a rank with one waits only
    // long enough for the others to arrive with the same error.
    if (code != 0 && std::chrono::duration<double>(std::chrono::steady_clock::now() - t0).count() > timeout_seconds) {
      say(message);
      say("stillpoint: rank " + std::to_string(rank) + " stopped alone; ending every rank (exit " + std::to_string(code) + ")\n");
      MPI_Abort(MPI_COMM_WORLD, code);
      std::_Exit(code);
    }
    std::this_thread::sleep_for(std::chrono::milliseconds(2));
  }
  int agreed = 0, first = -1;
  for (int r = 0; r < size; ++r) {
    agreed = std::max(agreed, codes[r]);
    if (codes[r] != 0 && first < 0) first = r;
  }
  if (rank == first) say(message);
  return agreed;
}

}  // namespace stillpoint
