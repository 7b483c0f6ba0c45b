#pragma once
// File helpers shared by every module. Writes are atomic: a reader (or a crash) sees either the
// old file or the complete new one, never a half-written file.

#include <cstddef>
#include <filesystem>
#include <string>
#include <string_view>
#include <vector>

namespace gyre {

/// Writes to "<path>.tmp.<pid>", then on commit(): flush, fsync, rename over path, fsync the
/// directory. Destroying an uncommitted AtomicFile removes the temporary and leaves path as it
/// was. Throws IoError on any failure.
class AtomicFile {
 public:
  explicit AtomicFile(std::filesystem::path path);
  AtomicFile(const AtomicFile&) = delete;
  AtomicFile& operator=(const AtomicFile&) = delete;
  ~AtomicFile();

  void write(const void* data, std::size_t size);
  void write(std::string_view text) { write(text.data(), text.size()); }
  /// Bytes written so far.
  std::size_t size() const noexcept { return size_; }
  void commit();

 private:
  void flush_buffer();
  std::filesystem::path path_;
  std::filesystem::path temp_;
  int fd_ = -1;
  std::size_t size_ = 0;
  std::string buffer_;
  bool committed_ = false;
};

/// Atomically replaces path with bytes.
void write_file_atomic(const std::filesystem::path& path, std::string_view bytes);

/// Removes the temporaries "<name>.tmp.<pid>" in `dir` (or only those of `target` when given)
/// whose writing process no longer runs: what a `kill -9` during a write leaves behind. Files of
/// a running process (and of this one) are kept. Returns the paths removed; never throws.
std::vector<std::filesystem::path> remove_stale_temp_files(const std::filesystem::path& dir);
std::vector<std::filesystem::path> remove_stale_temp_files_of(const std::filesystem::path& target);

/// Reads a whole file; throws IoError naming the path if it cannot.
std::string read_file(const std::filesystem::path& path);

}  // namespace gyre
