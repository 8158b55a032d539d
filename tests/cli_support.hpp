#pragma once
// Running the stillpoint binary from tests: a scratch working directory per test.
#include <gtest/gtest.h>
#include <sys/wait.h>
#include <unistd.h>

#include <cstdlib>
#include <filesystem>
#include <fstream>
#include <sstream>
#include <string>

namespace clitest {

namespace fs = std::filesystem;

struct CliRun {
  int rc = -1;
  std::string out, err;
};

inline std::string slurp(const fs::path& p) {
  std::ifstream f(p, std::ios::binary);
  std::stringstream ss;
  ss << f.rdbuf();
  return ss.str();
}

// A scratch directory per test; the CLI runs with it as working directory so that messages
// show the short relative file names the test wrote.
class Scratch {
 public:
  Scratch() {
    static int counter = 0;
    const auto* info = ::testing::UnitTest::GetInstance()->current_test_info();
    dir_ = fs::temp_directory_path() / ("stillpoint-cli-" + std::string(info->name()) + "-" +
                                        std::to_string(::getpid()) + "-" + std::to_string(counter++));
    fs::remove_all(dir_);
    fs::create_directories(dir_);
  }
  ~Scratch() {
    std::error_code ec;
    fs::remove_all(dir_, ec);
  }
  void write(const std::string& name, const std::string& content) const { std::ofstream(dir_ / name) << content; }
  std::string read(const std::string& name) const { return slurp(dir_ / name); }
  bool exists(const std::string& name) const { return fs::exists(dir_ / name); }
  /// True when `name` does not exist or is an empty directory.
  bool absent_or_empty(const std::string& name) const {
    const fs::path p = dir_ / name;
    if (!fs::exists(p)) return true;
    return fs::is_directory(p) && fs::is_empty(p);
  }
  CliRun cli(const std::string& args) const {
    const std::string cmd = "cd '" + dir_.string() + "' && OPENBLAS_NUM_THREADS=1 '" + STILLPOINT_CLI_PATH + "' " + args +
                            " >.stdout 2>.stderr";
    const int status = std::system(cmd.c_str());
    CliRun r;
    r.rc = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
    r.out = slurp(dir_ / ".stdout");
    r.err = slurp(dir_ / ".stderr");
    return r;
  }
  const fs::path& dir() const { return dir_; }

 private:
  fs::path dir_;
};


}  // namespace clitest
