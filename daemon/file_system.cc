#include "daemon/file_system.h"

#include <fcntl.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <filesystem>
#include <system_error>
#include <utility>

namespace plumbline {
namespace {

constexpr std::size_t kMaxReadBytes = 16u << 20;  // state files are small

Status Errno(std::string_view what, const std::string& path, int error) {
  return Status::IoError(std::string(what) + " " + path + ": " + std::strerror(error));
}

}  // namespace

StatusOr<std::string> ReadWholeFile(const std::string& path, std::size_t max_bytes) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    if (errno == ENOENT) return Status::NotFound("no file " + path);
    return Errno("cannot open", path, errno);
  }
  // Read straight into a string of the file's size (growing a string by
  // chunks copies it about twice over and faults in every page it leaves
  // behind); a file that grows meanwhile is read on to its end.
  std::string contents;
  struct stat info {};
  if (::fstat(fd, &info) == 0 && info.st_size > 0) {
    contents.resize(std::min(static_cast<std::size_t>(info.st_size), max_bytes) + 1);
  } else {
    contents.resize(65536);
  }
  std::size_t size = 0;
  while (true) {
    if (size == contents.size()) contents.resize(2 * contents.size());
    const ssize_t n = ::read(fd, contents.data() + size, contents.size() - size);
    if (n < 0) {
      if (errno == EINTR) continue;
      const int error = errno;
      ::close(fd);
      return Errno("cannot read", path, error);
    }
    if (n == 0) break;
    size += static_cast<std::size_t>(n);
    if (size > max_bytes) {
      ::close(fd);
      return Status::IoError(path + ": larger than " + std::to_string(max_bytes >> 20) +
                             " MiB; not a state file");
    }
  }
  contents.resize(size);
  ::close(fd);
  return contents;
}

StatusOr<MappedFile> MappedFile::Open(const std::string& path) {
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    if (errno == ENOENT) return Status::NotFound("no file " + path);
    return Errno("cannot open", path, errno);
  }
  struct stat info {};
  if (::fstat(fd, &info) != 0) {
    const int error = errno;
    ::close(fd);
    return Errno("cannot stat", path, error);
  }
  if (info.st_size <= 0) {
    ::close(fd);
    return MappedFile();
  }
  const auto size = static_cast<std::size_t>(info.st_size);
  // MAP_POPULATE reads the pages in with one call instead of a fault per page.
  void* data = ::mmap(nullptr, size, PROT_READ, MAP_PRIVATE | MAP_POPULATE, fd, 0);
  const int error = errno;
  ::close(fd);  // the mapping keeps the file
  if (data == MAP_FAILED) return Errno("cannot map", path, error);
  return MappedFile(static_cast<const char*>(data), size);
}

MappedFile::MappedFile(MappedFile&& other) noexcept
    : data_(std::exchange(other.data_, nullptr)), size_(std::exchange(other.size_, 0)) {}

MappedFile& MappedFile::operator=(MappedFile&& other) noexcept {
  if (this != &other) {
    Unmap();
    data_ = std::exchange(other.data_, nullptr);
    size_ = std::exchange(other.size_, 0);
  }
  return *this;
}

MappedFile::~MappedFile() { Unmap(); }

void MappedFile::Unmap() {
  if (data_ != nullptr) ::munmap(const_cast<char*>(data_), size_);
  data_ = nullptr;
  size_ = 0;
}

namespace {

std::string DirectoryOf(const std::string& path) {
  const std::size_t slash = path.rfind('/');
  if (slash == std::string::npos) return ".";
  if (slash == 0) return "/";
  return path.substr(0, slash);
}

Status SyncDirectory(const std::string& path) {
  const std::string directory = DirectoryOf(path);
  const int fd = ::open(directory.c_str(), O_RDONLY | O_DIRECTORY | O_CLOEXEC);
  if (fd < 0) return Errno("cannot open directory", directory, errno);
  Status status;
  if (::fsync(fd) != 0) status = Errno("cannot fsync directory", directory, errno);
  ::close(fd);
  return status;
}

Status WriteAll(int fd, std::string_view data, const std::string& path) {
  while (!data.empty()) {
    const ssize_t n = ::write(fd, data.data(), data.size());
    if (n < 0) {
      if (errno == EINTR) continue;
      return Errno("cannot write", path, errno);
    }
    data.remove_prefix(static_cast<std::size_t>(n));
  }
  return Status::Ok();
}

class PosixWritableFile : public WritableFile {
 public:
  PosixWritableFile(int fd, std::string path) : fd_(fd), path_(std::move(path)) {}
  ~PosixWritableFile() override { Close(); }
  Status Append(std::string_view data) override {
    if (fd_ < 0) return Status::FailedPrecondition("file closed: " + path_);
    return WriteAll(fd_, data, path_);
  }
  Status Sync() override {
    if (fd_ < 0) return Status::FailedPrecondition("file closed: " + path_);
    if (::fdatasync(fd_) != 0) return Errno("cannot fsync", path_, errno);
    return Status::Ok();
  }
  Status Close() override {
    if (fd_ < 0) return Status::Ok();
    const int fd = fd_;
    fd_ = -1;
    if (::close(fd) != 0) return Errno("cannot close", path_, errno);
    return Status::Ok();
  }

 private:
  int fd_;
  std::string path_;
};

}  // namespace

Status FileSystem::ReplaceFileFromPieces(const std::string& path,
                                         std::span<const std::string_view> pieces) {
  std::string joined;
  for (std::string_view piece : pieces) joined += piece;
  return ReplaceFile(path, joined);
}

namespace {

class PosixFileSystem : public FileSystem {
 public:
  StatusOr<std::unique_ptr<WritableFile>> OpenAppend(const std::string& path) override {
    struct stat info {};
    const bool existed = ::stat(path.c_str(), &info) == 0;
    const int fd = ::open(path.c_str(), O_WRONLY | O_APPEND | O_CREAT | O_CLOEXEC, 0640);
    if (fd < 0) return Errno("cannot open", path, errno);
    if (!existed) {
      if (Status status = SyncDirectory(path); !status.ok()) {
        ::close(fd);
        return status;
      }
    }
    return std::unique_ptr<WritableFile>(new PosixWritableFile(fd, path));
  }

  Status ReplaceFile(const std::string& path, std::string_view contents) override {
    return ReplaceFileFromPieces(path, std::span<const std::string_view>(&contents, 1));
  }

  Status ReplaceFileFromPieces(const std::string& path,
                               std::span<const std::string_view> pieces) override {
    const std::string temporary = path + ".tmp";
    const int fd =
        ::open(temporary.c_str(), O_WRONLY | O_CREAT | O_TRUNC | O_CLOEXEC, 0640);
    if (fd < 0) return Errno("cannot create", temporary, errno);
    Status status;
    for (std::string_view piece : pieces) {
      if (status.ok()) status = WriteAll(fd, piece, temporary);
    }
    if (status.ok() && ::fsync(fd) != 0) status = Errno("cannot fsync", temporary, errno);
    if (::close(fd) != 0 && status.ok()) status = Errno("cannot close", temporary, errno);
    if (status.ok() && ::rename(temporary.c_str(), path.c_str()) != 0) {
      status = Errno("cannot rename onto", path, errno);
    }
    if (!status.ok()) {
      ::unlink(temporary.c_str());
      return status;
    }
    return SyncDirectory(path);
  }

  StatusOr<std::string> ReadFile(const std::string& path) override {
    return ReadWholeFile(path, kMaxReadBytes);
  }

  Status CreateDirectories(const std::string& path) override {
    std::error_code error;
    const bool created = std::filesystem::create_directories(path, error);
    if (error)
      return Status::IoError("cannot create directory " + path + ": " + error.message());
    if (created) ::chmod(path.c_str(), 0750);  // an existing directory keeps its mode
    return Status::Ok();
  }
};

}  // namespace

FileSystem* FileSystem::Default() {
  static PosixFileSystem file_system;
  return &file_system;
}

}  // namespace plumbline
