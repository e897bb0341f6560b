// A file system for tests: POSIX (FileSystem::Default()), except that a test
// may step in before each append or fsync of a file opened for appending, to
// inject a failure or hold the call (a full or slow disk).
#pragma once

#include <functional>
#include <memory>
#include <string>
#include <string_view>
#include <utility>

#include "daemon/file_system.h"
#include "detectors/status.h"

namespace plumbline::test_support {

class InterposedFileSystem : public FileSystem {
 public:
  // Called before each Append / Sync of an appended file, on the caller's
  // thread; a status other than Ok is returned instead of doing it. Set them
  // before the file system is used.
  std::function<Status(std::string_view data)> before_append;
  std::function<Status()> before_sync;

  StatusOr<std::unique_ptr<WritableFile>> OpenAppend(const std::string& path) override {
    auto file = FileSystem::Default()->OpenAppend(path);
    if (!file.ok()) return file.status();
    return std::unique_ptr<WritableFile>(new File(this, std::move(file).value()));
  }
  Status ReplaceFile(const std::string& path, std::string_view contents) override {
    return FileSystem::Default()->ReplaceFile(path, contents);
  }
  StatusOr<std::string> ReadFile(const std::string& path) override {
    return FileSystem::Default()->ReadFile(path);
  }
  Status CreateDirectories(const std::string& path) override {
    return FileSystem::Default()->CreateDirectories(path);
  }

 private:
  class File : public WritableFile {
   public:
    File(InterposedFileSystem* fs, std::unique_ptr<WritableFile> inner)
        : fs_(fs), inner_(std::move(inner)) {}
    Status Append(std::string_view data) override {
      if (fs_->before_append) {
        if (Status status = fs_->before_append(data); !status.ok()) return status;
      }
      return inner_->Append(data);
    }
    Status Sync() override {
      if (fs_->before_sync) {
        if (Status status = fs_->before_sync(); !status.ok()) return status;
      }
      return inner_->Sync();
    }
    Status Close() override { return inner_->Close(); }

   private:
    InterposedFileSystem* fs_;
    std::unique_ptr<WritableFile> inner_;
  };
};

}  // namespace plumbline::test_support
