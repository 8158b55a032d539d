// Replays files (or every file in folders) through one fuzz target without libFuzzer, so the
// ordinary test suite re-runs the seed corpus and every past finding with any compiler.
//   stillpoint_fuzz_replay TARGET PATH...          exit 0 when every input is accepted
//   stillpoint_fuzz_replay --write-checkpoint-seed FILE
#include <algorithm>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <iostream>
#include <iterator>
#include <string>
#include <vector>

#include "targets.hpp"

namespace fs = std::filesystem;

int main(int argc, char** argv) {
  if (argc == 3 && std::string(argv[1]) == "--write-checkpoint-seed") {
    std::ofstream out(argv[2], std::ios::binary);
    out << stillpoint::fuzz::checkpoint_seed();
    return out ? 0 : 1;
  }
  if (argc < 3) {
    std::cerr << "usage: " << argv[0] << " TARGET PATH...  (targets:";
    for (const auto& t : stillpoint::fuzz::targets()) std::cerr << ' ' << t.name;
    std::cerr << ")\n";
    return 2;
  }
  const auto* target = stillpoint::fuzz::find_target(argv[1]);
  if (!target) {
    std::cerr << "no fuzz target named " << argv[1] << "\n";
    return 2;
  }
  std::vector<fs::path> files;
  for (int i = 2; i < argc; ++i) {
    const fs::path p(argv[i]);
    if (fs::is_directory(p)) {
      for (const auto& e : fs::recursive_directory_iterator(p))
        if (e.is_regular_file()) files.push_back(e.path());
    } else if (fs::is_regular_file(p)) {
      files.push_back(p);
    } else {
      std::cerr << "no such file or folder: " << p << "\n";
      return 2;
    }
  }
  std::sort(files.begin(), files.end());
  for (const auto& f : files) {
    std::ifstream in(f, std::ios::binary);
    const std::string bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
    stillpoint::fuzz::run_one(*target, reinterpret_cast<const std::uint8_t*>(bytes.data()), bytes.size());
  }
  std::cout << target->name << ": " << files.size() << " inputs replayed, all accepted\n";
  return 0;
}
