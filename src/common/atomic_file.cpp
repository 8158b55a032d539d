#include "stillpoint/common/atomic_file.hpp"

#include <unistd.h>

#include <atomic>
#include <filesystem>
#include <fstream>
#include <utility>
#include <vector>

#include "stillpoint/common/errors.hpp"

namespace stillpoint {

namespace {

namespace fs = std::filesystem;

// Writes `content` beside `path` under a temporary name and returns that name.
fs::path write_temporary(const std::string& path, const std::string& content) {
  static std::atomic<int> counter{0};
  const fs::path target(path);
  std::error_code ec;
  if (target.has_parent_path()) fs::create_directories(target.parent_path(), ec);
  if (ec) throw OutputError(path, "cannot create the output folder: " + ec.message());
  std::string tmp_name(".");  // append, not operator+: GCC 12 warns falsely (-Wrestrict)
  tmp_name.append(target.filename().string()).append(".tmp.").append(std::to_string(::getpid()));
  tmp_name.append(".").append(std::to_string(counter++));
  const fs::path tmp = target.parent_path() / tmp_name;
  std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
  if (!out) throw OutputError(path, "cannot write output file (is the directory writable?)");
  out << content;
  out.flush();
  if (!out) {
    out.close();
    fs::remove(tmp, ec);
    throw OutputError(path, "writing the output file failed (disk full?)");
  }
  return tmp;
}

}  // namespace

void write_file_atomically(const std::string& path, const std::string& content) {
  write_files_atomically({{path, content}});
}

void write_files_atomically(const std::vector<std::pair<std::string, std::string>>& files) {
  std::vector<fs::path> tmps;
  std::error_code ec;
  try {
    for (const auto& [path, content] : files) tmps.push_back(write_temporary(path, content));
  } catch (...) {
    for (const auto& t : tmps) fs::remove(t, ec);
    throw;
  }
  // Every file is complete on disk before the first one appears under its name.
  for (std::size_t i = 0; i < files.size(); ++i) {
    fs::rename(tmps[i], files[i].first, ec);
    if (ec) {
      for (std::size_t j = i; j < tmps.size(); ++j) fs::remove(tmps[j], ec);
      throw OutputError(files[i].first, "cannot move the finished output into place: " + ec.message());
    }
  }
}

}  // namespace stillpoint
