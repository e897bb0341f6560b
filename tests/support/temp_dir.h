// Temporary directories for tests: a fresh path per name and process, removed
// with everything in it when the test program exits, so repeated runs leave
// nothing behind in the temporary folder.
#pragma once

#include <gtest/gtest.h>
#include <unistd.h>

#include <filesystem>
#include <mutex>
#include <string>
#include <system_error>
#include <vector>

namespace plumbline::test_support {

// <gtest's temporary folder>/<name>_<pid>, emptied first; created unless
// `create` is false (for code under test that must create it itself).
inline std::string FreshTempDir(const std::string& name, bool create = true) {
  struct Cleanup {
    std::mutex mutex;
    std::vector<std::string> dirs;
    ~Cleanup() {
      for (const std::string& dir : dirs) {
        std::error_code ignored;
        std::filesystem::remove_all(dir, ignored);
      }
    }
  };
  static Cleanup cleanup;
  const std::string dir =
      ::testing::TempDir() + "/" + name + "_" + std::to_string(::getpid());
  std::filesystem::remove_all(dir);
  if (create) std::filesystem::create_directories(dir);
  std::lock_guard<std::mutex> lock(cleanup.mutex);
  cleanup.dirs.push_back(dir);
  return dir;
}

}  // namespace plumbline::test_support
