#pragma once
// Output files appear whole or not at all: content goes to a temporary file in the target
// directory, which is then renamed over the target (atomic on POSIX file systems).
#include <string>

namespace stillpoint {

/// Writes `content` to `path` atomically, creating parent directories. Throws InputError if
/// the location is not writable.
void write_file_atomically(const std::string& path, const std::string& content);

}  // namespace stillpoint
