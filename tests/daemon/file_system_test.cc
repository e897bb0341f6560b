// ReadWholeFile and MappedFile (daemon/file_system.h): whole files of any size
// come back byte for byte, and one over the caller's limit is refused.
#include "daemon/file_system.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <cstdio>
#include <string>
#include <utility>

namespace plumbline {
namespace {

std::string WriteTemp(const std::string& name, const std::string& contents) {
  const std::string path =
      testing::TempDir() + "/file_system_" + name + "_" + std::to_string(::getpid());
  std::FILE* f = std::fopen(path.c_str(), "wb");
  EXPECT_NE(f, nullptr);
  if (f == nullptr) return path;
  EXPECT_EQ(std::fwrite(contents.data(), 1, contents.size(), f), contents.size());
  std::fclose(f);
  return path;
}

TEST(ReadWholeFileTest, ReturnsFilesOfEverySizeByteForByte) {
  for (std::size_t size : {0u, 1u, 65535u, 65536u, 65537u, 3u << 20}) {
    std::string contents(size, '\0');
    for (std::size_t i = 0; i < size; ++i) contents[i] = static_cast<char>(i * 7919 % 251);
    const std::string path = WriteTemp("size" + std::to_string(size), contents);
    const auto read = ReadWholeFile(path, 16u << 20);
    ASSERT_TRUE(read.ok()) << read.status().ToString();
    EXPECT_EQ(*read, contents) << size << " bytes";
    std::remove(path.c_str());
  }
}

TEST(ReadWholeFileTest, RefusesAFileOverTheLimitAndNamesAMissingOne) {
  const std::string path = WriteTemp("limit", std::string(2u << 20, 'x'));
  const auto refused = ReadWholeFile(path, 1u << 20);
  EXPECT_EQ(refused.status().code(), Status::Code::kIoError);
  EXPECT_NE(refused.status().message().find("larger than 1 MiB"), std::string::npos)
      << refused.status().message();
  const auto exact = ReadWholeFile(path, 2u << 20);
  ASSERT_TRUE(exact.ok());
  EXPECT_EQ(exact->size(), 2u << 20);
  std::remove(path.c_str());
  EXPECT_EQ(ReadWholeFile(path, 1u << 20).status().code(), Status::Code::kNotFound);
}

TEST(MappedFileTest, MapsFilesOfEverySizeByteForByteAndNamesAMissingOne) {
  for (std::size_t size : {0u, 1u, 4095u, 4096u, 4097u, 3u << 20}) {
    std::string contents(size, '\0');
    for (std::size_t i = 0; i < size; ++i)
      contents[i] = static_cast<char>(i * 7919 % 251);
    const std::string path = WriteTemp("mapped" + std::to_string(size), contents);
    auto mapped = MappedFile::Open(path);
    ASSERT_TRUE(mapped.ok()) << mapped.status().ToString();
    // Moved, the mapping goes with it; the file can go while mapped.
    MappedFile kept = std::move(mapped).value();
    std::remove(path.c_str());
    EXPECT_EQ(kept.bytes(), contents) << size << " bytes";
    MappedFile other;
    other = std::move(kept);
    EXPECT_TRUE(kept.bytes().empty());
    EXPECT_EQ(other.bytes(), contents) << size << " bytes";
  }
  EXPECT_EQ(MappedFile::Open(testing::TempDir() + "/no_such_file").status().code(),
            Status::Code::kNotFound);
}

}  // namespace
}  // namespace plumbline
