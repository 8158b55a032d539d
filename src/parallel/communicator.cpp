#include "stillpoint/parallel/communicator.hpp"

#include <algorithm>
#include <numeric>
#include <stdexcept>

namespace stillpoint {

namespace {

class SerialCommunicator final : public Communicator {
 public:
  int rank() const override { return 0; }
  int size() const override { return 1; }
  std::vector<std::string> all_gather(const std::string& mine) const override { return {mine}; }
};

}  // namespace

const Communicator& serial_communicator() {
  static const SerialCommunicator c;
  return c;
}

std::vector<int> assign_by_cost(const std::vector<double>& cost, int ranks) {
  if (ranks < 1) throw std::logic_error("assign_by_cost: ranks < 1");
  std::vector<int> order(cost.size());
  std::iota(order.begin(), order.end(), 0);
  std::stable_sort(order.begin(), order.end(), [&](int a, int b) { return cost[a] > cost[b]; });
  std::vector<double> load(static_cast<std::size_t>(ranks), 0.0);
  std::vector<int> owner(cost.size(), 0);
  for (int i : order) {
    const auto r = static_cast<int>(std::min_element(load.begin(), load.end()) - load.begin());
    owner[i] = r;
    load[r] += cost[i];
  }
  return owner;
}

double assignment_efficiency(const std::vector<double>& cost, int ranks) {
  const std::vector<int> owner = assign_by_cost(cost, ranks);
  std::vector<double> load(static_cast<std::size_t>(ranks), 0.0);
  double total = 0.0;
  for (std::size_t i = 0; i < cost.size(); ++i) {
    load[owner[i]] += cost[i];
    total += cost[i];
  }
  const double most = *std::max_element(load.begin(), load.end());
  return most > 0.0 ? total / (ranks * most) : 1.0;
}

}  // namespace stillpoint
