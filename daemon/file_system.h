// The daemon's file-system seam: appending durable logs and replacing small
// state files atomically. Sinks and inputs take a FileSystem* so tests can
// inject a failed write, fsync or rename. Thread-safe: PosixFileSystem keeps
// no state; a WritableFile is owned and used by one thread at a time.
#pragma once

#include <memory>
#include <span>
#include <string>
#include <string_view>

#include "detectors/status.h"

namespace plumbline {

// A file opened for appending.
class WritableFile {
 public:
  virtual ~WritableFile() = default;
  // Writes all of `data` at the end of the file (O_APPEND). IoError naming the
  // file and the system's reason on failure.
  virtual Status Append(std::string_view data) = 0;
  // Forces what was appended to stable storage (fdatasync).
  virtual Status Sync() = 0;
  // Closes the file; later calls do nothing.
  virtual Status Close() = 0;
};

class FileSystem {
 public:
  virtual ~FileSystem() = default;
  // Opens (creating with mode 0640 if absent) `path` for appending. A new file's
  // directory entry is made durable (the directory is fsynced).
  virtual StatusOr<std::unique_ptr<WritableFile>> OpenAppend(const std::string& path) = 0;
  // Replaces `path` with `contents` atomically: write a temporary file beside
  // it, fsync, rename over `path`, fsync the directory. On failure the old
  // file is untouched and the temporary file removed.
  virtual Status ReplaceFile(const std::string& path, std::string_view contents) = 0;
  // The same with the contents in pieces, written one after the other so
  // that they need not be joined in memory first. By default (a file system
  // that does not say otherwise) the pieces are joined and given to
  // ReplaceFile.
  virtual Status ReplaceFileFromPieces(const std::string& path,
                                       std::span<const std::string_view> pieces);
  // The whole file (at most 16 MiB). NotFound when it does not exist.
  virtual StatusOr<std::string> ReadFile(const std::string& path) = 0;
  // Creates `path` and its missing parents (mode 0750). Ok when it exists.
  virtual Status CreateDirectories(const std::string& path) = 0;

  // The process-wide POSIX implementation.
  static FileSystem* Default();
};

// A whole file mapped read-only into memory (POSIX mmap, private, pages read
// in at once): its bytes without a copy in the heap. The pages are the page
// cache's, so under memory pressure the kernel drops and re-reads them rather
// than swap a copy. The file must not be truncated while mapped (reading past
// its new end faults); Plumbline's state files are only ever replaced whole,
// by rename, which leaves a mapped file intact. Move-only; unmapped when
// destroyed.
class MappedFile {
 public:
  // NotFound when `path` does not exist; an empty file maps to no bytes.
  static StatusOr<MappedFile> Open(const std::string& path);

  MappedFile() = default;
  MappedFile(MappedFile&& other) noexcept;
  MappedFile& operator=(MappedFile&& other) noexcept;
  MappedFile(const MappedFile&) = delete;
  MappedFile& operator=(const MappedFile&) = delete;
  ~MappedFile();

  std::string_view bytes() const { return {data_, size_}; }

 private:
  MappedFile(const char* data, std::size_t size) : data_(data), size_(size) {}
  void Unmap();
  const char* data_ = nullptr;
  std::size_t size_ = 0;
};

// The whole file at `path` through POSIX read, refused (IoError) once it grows
// past max_bytes; NotFound when it does not exist. FileSystem::Default()'s
// ReadFile is this with 16 MiB.
StatusOr<std::string> ReadWholeFile(const std::string& path, std::size_t max_bytes);

}  // namespace plumbline
