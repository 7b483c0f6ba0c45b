#include "gyre/core/file.hpp"

#include <fcntl.h>
#include <signal.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <fstream>
#include <sstream>

#include "gyre/core/error.hpp"

namespace gyre {
namespace {
constexpr std::size_t kBufferBytes = 1 << 16;

std::string errno_text() {
  return std::strerror(errno);
}

void fsync_directory(const std::filesystem::path& dir) {
  const int fd = ::open(dir.empty() ? "." : dir.c_str(), O_RDONLY | O_DIRECTORY);
  if (fd < 0) return;  // Some filesystems refuse: the rename itself has happened.
  ::fsync(fd);
  ::close(fd);
}

// The writer's pid when `name` is "<something>.tmp.<digits>", else 0.
pid_t temp_owner(const std::string& name) {
  const std::size_t at = name.rfind(".tmp.");
  if (at == std::string::npos || at == 0 || at + 5 == name.size()) return 0;
  long long pid = 0;
  for (std::size_t i = at + 5; i < name.size(); ++i) {
    if (name[i] < '0' || name[i] > '9' || pid > 1'000'000'000) return 0;
    pid = pid * 10 + (name[i] - '0');
  }
  return static_cast<pid_t>(pid);
}

// kill(pid, 0) probes without sending: ESRCH means no such process (EPERM: it exists).
bool process_gone(pid_t pid) {
  return pid != ::getpid() && ::kill(pid, 0) != 0 && errno == ESRCH;
}

std::vector<std::filesystem::path> remove_stale(const std::filesystem::path& dir, const std::string& stem) {
  std::vector<std::filesystem::path> removed;
  std::error_code ec;
  for (std::filesystem::directory_iterator it(dir.empty() ? "." : dir, ec), end; !ec && it != end;
       it.increment(ec)) {
    const std::string name = it->path().filename().string();
    if (!stem.empty() && name.compare(0, stem.size() + 5, stem + ".tmp.") != 0) continue;
    const pid_t pid = temp_owner(name);
    std::error_code type;
    if (pid <= 0 || !it->is_regular_file(type) || !process_gone(pid)) continue;
    std::error_code rm;
    if (std::filesystem::remove(it->path(), rm)) removed.push_back(it->path());
  }
  return removed;
}
}  // namespace

std::vector<std::filesystem::path> remove_stale_temp_files(const std::filesystem::path& dir) {
  return remove_stale(dir, "");
}

std::vector<std::filesystem::path> remove_stale_temp_files_of(const std::filesystem::path& target) {
  return remove_stale(target.parent_path(), target.filename().string());
}

AtomicFile::AtomicFile(std::filesystem::path path) : path_(std::move(path)) {
  remove_stale_temp_files_of(path_);
  temp_ = path_;
  temp_ += ".tmp." + std::to_string(::getpid());
  fd_ = ::open(temp_.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0644);
  if (fd_ < 0) throw IoError("cannot create " + temp_.string() + ": " + errno_text());
  buffer_.reserve(kBufferBytes);
}

AtomicFile::~AtomicFile() {
  if (fd_ >= 0) ::close(fd_);
  if (!committed_) {
    std::error_code ec;
    std::filesystem::remove(temp_, ec);
  }
}

void AtomicFile::flush_buffer() {
  const char* p = buffer_.data();
  std::size_t left = buffer_.size();
  while (left > 0) {
    const ssize_t n = ::write(fd_, p, left);
    if (n < 0) {
      if (errno == EINTR) continue;
      throw IoError("cannot write " + temp_.string() + ": " + errno_text());
    }
    p += n;
    left -= static_cast<std::size_t>(n);
  }
  buffer_.clear();
}

void AtomicFile::write(const void* data, std::size_t size) {
  GYRE_CHECK(!committed_, "AtomicFile::write after commit");
  size_ += size;
  if (buffer_.size() + size > kBufferBytes) flush_buffer();
  if (size >= kBufferBytes) {
    buffer_.assign(static_cast<const char*>(data), size);
    flush_buffer();
  } else {
    buffer_.append(static_cast<const char*>(data), size);
  }
}

void AtomicFile::commit() {
  GYRE_CHECK(!committed_, "AtomicFile::commit called twice");
  flush_buffer();
  if (::fsync(fd_) != 0) throw IoError("cannot sync " + temp_.string() + ": " + errno_text());
  if (::close(fd_) != 0) {
    fd_ = -1;
    throw IoError("cannot close " + temp_.string() + ": " + errno_text());
  }
  fd_ = -1;
  if (::rename(temp_.c_str(), path_.c_str()) != 0)
    throw IoError("cannot rename " + temp_.string() + " to " + path_.string() + ": " + errno_text());
  committed_ = true;
  fsync_directory(path_.parent_path());
}

void write_file_atomic(const std::filesystem::path& path, std::string_view bytes) {
  AtomicFile file(path);
  file.write(bytes);
  file.commit();
}

std::string read_file(const std::filesystem::path& path) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw IoError("cannot open " + path.string() + ": " + errno_text());
  std::ostringstream ss;
  ss << in.rdbuf();
  if (in.bad()) throw IoError("cannot read " + path.string());
  return std::move(ss).str();
}

}  // namespace gyre
