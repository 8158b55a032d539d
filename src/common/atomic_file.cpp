#include "stillpoint/common/atomic_file.hpp"

#include <unistd.h>

#include <atomic>
#include <filesystem>
#include <fstream>

#include "stillpoint/common/errors.hpp"

namespace stillpoint {

void write_file_atomically(const std::string& path, const std::string& content) {
  namespace fs = std::filesystem;
  static std::atomic<int> counter{0};
  const fs::path target(path);
  std::error_code ec;
  if (target.has_parent_path()) fs::create_directories(target.parent_path(), ec);
  if (ec) throw OutputError(path, "cannot create the output folder: " + ec.message());
  std::string tmp_name(".");  // append, not operator+: GCC 12 warns falsely (-Wrestrict)
  tmp_name.append(target.filename().string()).append(".tmp.").append(std::to_string(::getpid()));
  tmp_name.append(".").append(std::to_string(counter++));
  const fs::path tmp = target.parent_path() / tmp_name;
  {
    std::ofstream out(tmp, std::ios::binary | std::ios::trunc);
    if (!out) throw OutputError(path, "cannot write output file (is the directory writable?)");
    out << content;
    out.flush();
    if (!out) {
      out.close();
      fs::remove(tmp, ec);
      throw OutputError(path, "writing the output file failed (disk full?)");
    }
  }
  fs::rename(tmp, target, ec);
  if (ec) {
    fs::remove(tmp, ec);
    throw OutputError(path, "cannot move the finished output into place: " + ec.message());
  }
}

}  // namespace stillpoint
