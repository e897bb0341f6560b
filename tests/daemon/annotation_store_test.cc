// Annotations outside the config file (daemon/annotation_store.h): the API's
// bodies and the state directory's file are read with the config's rules, and
// what is written reads back the same. The rules are the product's own.
#include "daemon/annotation_store.h"

#include <gtest/gtest.h>

#include <cstdlib>
#include <filesystem>

#include "config/config.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

std::vector<Annotation> Parse(std::string_view text, std::size_t first = 1) {
  std::vector<Annotation> out;
  const std::vector<ConfigError> errors = ParseAnnotationsText(text, "body", first, &out);
  EXPECT_TRUE(errors.empty()) << errors.front().ToString();
  return out;
}

TEST(AnnotationTextTest, OneJsonObjectReadsLikeAConfigEntry) {
  const auto parsed = Parse(
      R"({"kind": "maintenance", "match": "coldstore/**", "from": "2026-03-02T00:00:00Z",)"
      R"( "to": "2026-03-02T04:00:00Z", "learn": false, "note": "seal"})",
      7);
  ASSERT_EQ(parsed.size(), 1u);
  const Annotation& a = parsed[0];
  EXPECT_EQ(a.id, "maintenance-7");  // made up from first_number
  EXPECT_EQ(a.kind, AnnotationKind::kMaintenance);
  EXPECT_EQ(a.match, "coldstore/**");
  EXPECT_EQ(a.from, *ParseTime("2026-03-02T00:00:00Z"));
  EXPECT_EQ(a.to, *ParseTime("2026-03-02T04:00:00Z"));
  EXPECT_FALSE(a.learn);
  EXPECT_EQ(a.note, "seal");
}

TEST(AnnotationTextTest, ProblemsAreReportedWithTheirPosition) {
  std::vector<Annotation> out;
  auto errors = ParseAnnotationsText(
      R"({"kind": "planned-change", "at": "soon", "colour": "red"})", "body", 1, &out);
  ASSERT_EQ(errors.size(), 2u);
  EXPECT_NE(errors[0].ToString().find("body:1:"), std::string::npos)
      << errors[0].ToString();
  EXPECT_NE(errors[0].message.find("'soon'"), std::string::npos);
  EXPECT_NE(errors[1].message.find("colour"), std::string::npos);
  errors =
      ParseAnnotationsText(R"({"kind": "maintenance", "from": "2026-03-02T00:00:00Z",)"
                           R"( "to": "2026-03-01T00:00:00Z"})",
                           "body", 1, &out);
  ASSERT_EQ(errors.size(), 1u);  // the config's rule: from < to
  EXPECT_TRUE(out.empty());
  errors = ParseAnnotationsText("{not json", "body", 1, &out);
  ASSERT_EQ(errors.size(), 1u);
  EXPECT_NE(errors[0].message.find("syntax"), std::string::npos) << errors[0].message;
}

TEST(AnnotationFileTest, SavedAnnotationsReadBackTheSame) {
  const std::string dir = (std::filesystem::temp_directory_path() /
                           ("plumbline-annotations-" + std::to_string(::getpid())))
                              .string();
  std::filesystem::create_directories(dir);
  const std::string path = dir + "/" + kAnnotationFileName;
  FileSystem* fs = FileSystem::Default();
  auto none = LoadAnnotationFile(fs, path);
  ASSERT_TRUE(none.ok());
  EXPECT_TRUE(none->empty());  // no file yet: none

  std::vector<Annotation> saved = Parse(
      R"([{"id": "upgrade", "kind": "planned-change", "match": "coldstore/compressor-*/*",)"
      R"( "at": "2026-04-01T06:00:00.250Z", "direction": "down", "within": "90m",)"
      R"( "note": "new \"quiet\" fan, é"},)"
      R"( {"id": "seal", "kind": "maintenance", "from": "2026-03-02T00:00:00Z",)"
      R"( "to": "2026-03-03T00:00:00Z"}])");
  ASSERT_EQ(saved.size(), 2u);
  ASSERT_TRUE(SaveAnnotationFile(fs, path, saved).ok());
  auto loaded = LoadAnnotationFile(fs, path);
  ASSERT_TRUE(loaded.ok()) << loaded.status().ToString();
  ASSERT_EQ(loaded->size(), 2u);
  for (std::size_t i = 0; i < saved.size(); ++i) {
    const Annotation &a = saved[i], &b = (*loaded)[i];
    EXPECT_EQ(a.id, b.id);
    EXPECT_EQ(a.kind, b.kind);
    EXPECT_EQ(a.match, b.match);
    EXPECT_EQ(a.at, b.at);
    EXPECT_EQ(a.direction, b.direction);
    EXPECT_EQ(a.within, b.within);
    EXPECT_EQ(a.from, b.from);
    EXPECT_EQ(a.to, b.to);
    EXPECT_EQ(a.learn, b.learn);
    EXPECT_EQ(a.note, b.note);
  }
  EXPECT_EQ(
      AnnotationToJson(saved[1], "api"),
      R"({"id":"seal","kind":"maintenance","match":"**","from":"2026-03-02T00:00:00Z",)"
      R"("to":"2026-03-03T00:00:00Z","learn":true,"source":"api"})");
  ASSERT_TRUE(fs->ReplaceFile(path, "[{\"kind\": \"nonsense\"}]").ok());
  EXPECT_EQ(LoadAnnotationFile(fs, path).status().code(), Status::Code::kCorruption);
  std::filesystem::remove_all(dir);
}

}  // namespace
}  // namespace plumbline
