// libFuzzer's entry point for one target, chosen at compile time (STILLPOINT_FUZZ_TARGET).
#include <cstdio>
#include <cstdlib>

#include "targets.hpp"

namespace {
const stillpoint::fuzz::Target& chosen() {
  static const stillpoint::fuzz::Target* t = [] {
    const auto* found = stillpoint::fuzz::find_target(STILLPOINT_FUZZ_TARGET);
    if (!found) {
      std::fprintf(stderr, "no fuzz target named %s\n", STILLPOINT_FUZZ_TARGET);
      std::abort();
    }
    return found;
  }();
  return *t;
}
}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  stillpoint::fuzz::run_one(chosen(), data, size);
  return 0;
}
