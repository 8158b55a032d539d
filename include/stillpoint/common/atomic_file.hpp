#pragma once
// Output files appear whole or not at all: content goes to a temporary file in the target
// directory, which is then renamed over the target (atomic on POSIX file systems).
#include <string>
#include <utility>
#include <vector>

namespace stillpoint {

/// Writes `content` to `path` atomically, creating parent directories. Throws OutputError
/// (exit status 5) if the location is not writable or the disk is full.
void write_file_atomically(const std::string& path, const std::string& content);

/// An output set: every (path, content) is written to a temporary file first, and only when
/// all are complete are they renamed into place, so a full disk leaves none of them behind.
void write_files_atomically(const std::vector<std::pair<std::string, std::string>>& files);

}  // namespace stillpoint
