// Tests for config/config.h: mapping YAML onto ProfileOptions, defaults, first
// match wins, and every class of error with its exact FILE:LINE:COLUMN. The
// expected values are the contract of DESIGN.md ("Config (YAML)") and of
// config/config.h; line and column numbers are counted by hand from the texts
// below (1-based). Common practice, no published source.
#include "config/config.h"

#include <gtest/gtest.h>

#include <algorithm>
#include <filesystem>
#include <string>
#include <vector>

#include "detectors/random.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

constexpr EventTime kMinute = kMicrosPerMinute;
constexpr EventTime kHour = kMicrosPerHour;
constexpr EventTime kDay = kMicrosPerDay;

std::vector<ConfigError> Errors(const std::string& text, Config* config = nullptr) {
  Config scratch;
  return ParseConfigText(text, "test.yaml", config ? config : &scratch);
}

Config MustLoad(const std::string& text) {
  Config config;
  std::vector<ConfigError> errors = ParseConfigText(text, "test.yaml", &config);
  for (const ConfigError& e : errors) ADD_FAILURE() << e.ToString();
  return config;
}

// Exactly one error, at line:column, whose message contains every fragment.
void ExpectOneError(const std::string& text, int line, int column,
                    std::vector<std::string> fragments) {
  std::vector<ConfigError> errors = Errors(text);
  ASSERT_EQ(errors.size(), 1u) << [&] {
    std::string all;
    for (const ConfigError& e : errors) all += e.ToString() + "\n";
    return all;
  }();
  const ConfigError& e = errors[0];
  EXPECT_EQ(e.source, "test.yaml");
  EXPECT_EQ(e.line, line) << e.ToString();
  EXPECT_EQ(e.column, column) << e.ToString();
  for (const std::string& fragment : fragments) {
    EXPECT_NE(e.message.find(fragment), std::string::npos)
        << "missing '" << fragment << "' in: " << e.ToString();
  }
}

// ---- Mapping and defaults ----

TEST(ConfigTest, DesignExampleMapsEveryGuaranteedKey) {
  const Config config = MustLoad(R"(series:
  - match: "coldstore/*/temp_c"
    kind: gauge
    seasons: [1d, 7d]
    gaps: skip
    warmup: 48
    arl0: 5000
    shift: 1.0
    detectors: [cusum, page-hinkley, bocpd]
    agree: 1
    silence_after: 6h
)");
  ASSERT_EQ(config.series.size(), 1u);
  const ProfileOptions& p = config.series[0];
  EXPECT_EQ(p.match, "coldstore/*/temp_c");
  EXPECT_EQ(p.kind, SeriesKind::kGauge);
  EXPECT_EQ(p.seasons, (std::vector<EventTime>{kDay, 7 * kDay}));
  EXPECT_EQ(p.gaps, GapPolicy::kSkip);
  EXPECT_EQ(p.warmup, 48);
  EXPECT_EQ(p.arl0, 5000);
  EXPECT_EQ(p.shift, 1.0);
  EXPECT_EQ(p.detectors,
            (std::vector<DetectorKind>{DetectorKind::kCusum, DetectorKind::kPageHinkley,
                                       DetectorKind::kBocpd}));
  EXPECT_EQ(p.agree, 1);
  ASSERT_TRUE(p.silence_after.has_value());
  EXPECT_EQ(*p.silence_after, 6 * kHour);
}

TEST(ConfigTest, OptionalKeysMapOntoTheStruct) {
  const Config config = MustLoad(R"(series:
  - match: "a/**"
    kind: meter
    seasons: [365.25d, 8h]
    gaps: hold
    harmonics: [10, 4]
    every: 90s
    memory: 2w
    trend: false
    level_noise: 0.3
    lateness: 250ms
    detectors: [ewma, cusum]
    agree: 2
    agree_within: 12
    cooldown: 30
    count_chart: poisson
    adapt_thresholds: true
    arl0: 2.5e4
    shift: "0.75"
)");
  ASSERT_EQ(config.series.size(), 1u);
  const ProfileOptions& p = config.series[0];
  EXPECT_EQ(p.kind, SeriesKind::kMeter);
  // 365.25 d = 31,557,600 s, exactly (the Julian year).
  EXPECT_EQ(p.seasons,
            (std::vector<EventTime>{31'557'600 * kMicrosPerSecond, 8 * kHour}));
  EXPECT_EQ(p.gaps, GapPolicy::kHold);
  EXPECT_EQ(p.harmonics, (std::vector<int>{10, 4}));
  EXPECT_EQ(p.every, std::optional<EventTime>(90 * kMicrosPerSecond));
  EXPECT_EQ(p.memory, std::optional<EventTime>(14 * kDay));
  EXPECT_FALSE(p.trend);
  EXPECT_EQ(p.level_noise, 0.3);
  EXPECT_FALSE(p.level_noise_auto);
  EXPECT_EQ(p.lateness, 250'000);
  EXPECT_EQ(p.detectors,
            (std::vector<DetectorKind>{DetectorKind::kEwma, DetectorKind::kCusum}));
  EXPECT_EQ(p.agree, 2);
  EXPECT_EQ(p.agree_within, 12);
  EXPECT_EQ(p.cooldown, 30);
  EXPECT_EQ(p.count_chart, CountChart::kPoisson);
  EXPECT_TRUE(p.adapt_thresholds);
  EXPECT_EQ(p.arl0, 25000);
  EXPECT_EQ(p.shift, 0.75);  // a quoted number is read like a plain one
}

TEST(ConfigTest, AbsentKeysTakeTheStructDefaults) {
  const Config config = MustLoad("series:\n  - match: \"x/*\"\n");
  ASSERT_EQ(config.series.size(), 1u);
  const ProfileOptions& p = config.series[0];
  const ProfileOptions defaults;
  EXPECT_EQ(p.match, "x/*");
  EXPECT_EQ(p.kind, defaults.kind);
  EXPECT_EQ(p.seasons, defaults.seasons);
  EXPECT_EQ(p.gaps, defaults.gaps);
  EXPECT_EQ(p.warmup, defaults.warmup);
  EXPECT_EQ(p.arl0, defaults.arl0);
  EXPECT_EQ(p.shift, defaults.shift);
  EXPECT_EQ(p.detectors, defaults.detectors);
  EXPECT_EQ(p.agree, defaults.agree);
  EXPECT_EQ(p.silence_after, defaults.silence_after);
  EXPECT_EQ(p.harmonics, defaults.harmonics);
  EXPECT_EQ(p.every, defaults.every);
  EXPECT_EQ(p.memory, defaults.memory);
  EXPECT_EQ(p.trend, defaults.trend);
  EXPECT_EQ(p.level_noise, defaults.level_noise);
  EXPECT_EQ(p.level_noise_auto, defaults.level_noise_auto);
  EXPECT_EQ(p.lateness, defaults.lateness);
  EXPECT_EQ(p.agree_within, defaults.agree_within);
  EXPECT_EQ(p.cooldown, defaults.cooldown);
}

TEST(ConfigTest, NoProfilesMeansOneCatchAllWithDefaults) {
  for (const std::string text :
       {"", "# only a comment\n", "series:\n", "series: []\n", "series: ~\n"}) {
    const Config config = MustLoad(text);
    ASSERT_EQ(config.series.size(), 1u) << "'" << text << "'";
    EXPECT_EQ(config.series[0].match, "**");
    EXPECT_EQ(config.series[0].warmup, ProfileOptions().warmup);
    EXPECT_EQ(config.series[0].seasons, ProfileOptions().seasons);
    const ProfileOptions* found = MatchProfile(config, "coldstore/freezer-1/temp_c");
    EXPECT_EQ(found, &config.series[0]);
  }
}

TEST(ConfigTest, ProfileWithoutMatchGovernsEverySeries) {
  const Config config = MustLoad("series:\n  - kind: count\n");
  ASSERT_EQ(config.series.size(), 1u);
  EXPECT_EQ(config.series[0].match, "**");
  EXPECT_NE(MatchProfile(config, "a/b/c"), nullptr);
}

TEST(ConfigTest, EmptySeasonsListMeansNoSeasons) {
  const Config config = MustLoad("series:\n  - match: x\n    seasons: []\n");
  EXPECT_TRUE(config.series[0].seasons.empty());
}

TEST(ConfigTest, LatenessMayBeZeroWithOrWithoutUnit) {
  for (const char* zero : {"0", "0s", "0.0m", "0ms"}) {
    const Config config =
        MustLoad(std::string("series:\n  - match: x\n    lateness: ") + zero + "\n");
    EXPECT_EQ(config.series[0].lateness, 0) << zero;
  }
}

// ---- First match wins ----

TEST(ConfigTest, FirstMatchingProfileWinsAndUnmatchedSeriesGetNone) {
  const Config config = MustLoad(R"(series:
  - match: "coldstore/freezer-1/temp_c"
    warmup: 10
  - match: "coldstore/*/temp_c"
    warmup: 20
  - match: "coldstore/**"
    warmup: 30
)");
  ASSERT_EQ(config.series.size(), 3u);
  EXPECT_EQ(MatchProfile(config, "coldstore/freezer-1/temp_c"), &config.series[0]);
  EXPECT_EQ(MatchProfile(config, "coldstore/freezer-2/temp_c"), &config.series[1]);
  EXPECT_EQ(MatchProfile(config, "coldstore/main/energy_kwh"), &config.series[2]);
  EXPECT_EQ(MatchProfile(config, "coldstore/a/b/temp_c"), &config.series[2]);
  EXPECT_EQ(MatchProfile(config, "harbour/temp_c"), nullptr);
  EXPECT_EQ(MatchProfile(Config{}, "x"), nullptr);
}

// ---- Errors, one class at a time, with exact positions ----

TEST(ConfigTest, UnknownProfileKeySuggestsTheClosestAndListsValidKeys) {
  ExpectOneError(
      "series:\n  - match: x\n    warmpu: 48\n", 3, 5,
      {"unknown key 'warmpu' in a series profile", "did you mean 'warmup'?",
       "valid keys: match, kind, seasons, gaps, warmup, arl0, shift, detectors, "
       "agree, silence_after, harmonics, every, memory, trend, lateness, "
       "agree_within, cooldown"});
}

TEST(ConfigTest, UnknownKeyFarFromAnyGetsNoSuggestion) {
  std::vector<ConfigError> errors = Errors("series:\n  - match: x\n    colour: blue\n");
  ASSERT_EQ(errors.size(), 1u);
  EXPECT_EQ(errors[0].message.find("did you mean"), std::string::npos)
      << errors[0].message;
  EXPECT_NE(errors[0].message.find("unknown key 'colour'"), std::string::npos);
}

TEST(ConfigTest, UnknownTopLevelKeyListsTheKnownOnes) {
  ExpectOneError("sereis:\n  - match: x\n", 1, 1,
                 {"unknown key 'sereis' at the top level", "did you mean 'series'?",
                  "(valid keys: series, listeners, shards"});
}

TEST(ConfigTest, PlannedTopLevelSectionIsReportedAsNotYetSupported) {
  ExpectOneError("series: []\ncovariates:\n  - series: x\n", 2, 1,
                 {"top-level section 'covariates' is not supported by this version yet",
                  "valid keys: series, listeners"});
}

TEST(ConfigTest, WrongTypeNamesTheKeyTheExpectedTypeAndTheText) {
  ExpectOneError("series:\n  - match: x\n    warmup: lots\n", 3, 13,
                 {"warmup: expected a whole number of readings, got 'lots'"});
  ExpectOneError("series:\n  - match: x\n    warmup: 48.5\n", 3, 13,
                 {"warmup: expected a whole number of readings, got '48.5'"});
  ExpectOneError("series:\n  - match: x\n    arl0: many\n", 3, 11,
                 {"arl0: expected a number of readings, got 'many'"});
  ExpectOneError("series:\n  - match: x\n    shift: .nan\n", 3, 12,
                 {"shift: expected a number", "got '.nan'"});
  ExpectOneError("series:\n  - match: x\n    trend: maybe\n", 3, 12,
                 {"trend: expected true | false, got 'maybe'"});
  ExpectOneError("series:\n  - match: x\n    kind: [gauge]\n", 3, 11,
                 {"kind: expected one of gauge | count | meter, got a list"});
  ExpectOneError(
      "series:\n  - match: x\n    seasons: 1d\n", 3, 14,
      {"seasons: expected a list of durations such as [1d, 7d] ([] for none), got '1d'"});
  ExpectOneError("series:\n  - match: x\n    detectors: {cusum: 1}\n", 3, 16,
                 {"detectors: expected a list of detectors", "got a mapping"});
}

TEST(ConfigTest, EmptyValueIsReportedAtItsKey) {
  ExpectOneError("series:\n  - match: x\n    warmup:\n    kind: count\n", 3, 5,
                 {"warmup: no value; expected a whole number of readings",
                  "remove the key to use the default"});
}

TEST(ConfigTest, EmptyListElementIsReportedAtTheElement) {
  ExpectOneError("series:\n  - match: x\n    seasons: [1d, ~]\n", 3, 19,
                 {"seasons: empty list element; expected a duration such as 15m"});
}

TEST(ConfigTest, BadDurationsSayWhatADurationLooksLike) {
  ExpectOneError(
      "series:\n  - match: x\n    silence_after: 6x\n", 3, 20,
      {"silence_after: duration \"6x\": unknown unit", "a duration such as 15m"});
  // A bare number is refused with a hint rather than taken as seconds.
  ExpectOneError("series:\n  - match: x\n    silence_after: 900\n", 3, 20,
                 {"silence_after: '900' has no unit; expected a duration such as 15m "
                  "(units ms, s, m, h, d, w)"});
  // Inside a list the error points at the element.
  ExpectOneError("series:\n  - match: x\n    seasons: [1d, 7x]\n", 3, 19,
                 {"seasons: duration \"7x\""});
  ExpectOneError("series:\n  - match: x\n    every: 0s\n", 3, 12,
                 {"every: duration \"0s\"", "at least one microsecond"});
}

TEST(ConfigTest, BadEnumListsTheChoicesAndSuggestsOne) {
  ExpectOneError("series:\n  - match: x\n    kind: gague\n", 3, 11,
                 {"kind: unknown value 'gague'; expected one of gauge | count | meter",
                  "did you mean 'gauge'?"});
  ExpectOneError("series:\n  - match: x\n    gaps: nothing\n", 3, 11,
                 {"gaps: unknown value 'nothing'; expected one of skip | zero | hold"});
  ExpectOneError("series:\n  - match: x\n    detectors: [cusum, page-hinkly]\n", 3, 24,
                 {"detectors: unknown value 'page-hinkly'; expected one of cusum | "
                  "page-hinkley | bocpd | ewma",
                  "did you mean 'page-hinkley'?"});
}

TEST(ConfigTest, OutOfRangeValueUsesTheProfileRuleAtTheOffendingKey) {
  ExpectOneError("series:\n  - match: x\n    warmup: 2\n", 3, 13,
                 {"warmup must be in [4, 1000000] readings"});
  ExpectOneError("series:\n  - match: x\n    detectors: [cusum]\n    agree: 2\n", 4, 12,
                 {"agree must be in [1, 1]"});
  ExpectOneError("series:\n  - match: x\n    shift: 0\n", 3, 12,
                 {"shift must be in (0, 10] standard deviations"});
  ExpectOneError("series:\n  - match: x\n    detectors: [cusum, cusum]\n", 3, 16,
                 {"detectors must not repeat 'cusum'"});
  // The rule ties two keys together; it names harmonics, so it points there.
  ExpectOneError("series:\n  - match: x\n    seasons: [1d]\n    harmonics: [3, 2]\n", 4,
                 16, {"harmonics must give one count per season (seasons lists 1)"});
}

TEST(ConfigTest, InvalidGlobNamesTheProblem) {
  ExpectOneError("series:\n  - match: \"coldstore/[ab\"\n", 2, 12,
                 {"match: invalid glob \"coldstore/[ab\": unclosed '['", "at offset 10"});
  ExpectOneError("series:\n  - match: \"\"\n", 2, 12,
                 {"match: invalid glob", "empty pattern"});
}

TEST(ConfigTest, YamlSyntaxErrorHasTheParsersPosition) {
  ExpectOneError("series:\n  - kind: gauge: count\n", 2, 16, {"YAML syntax error"});
  ExpectOneError("series:\n  - kind: [gauge\n    warmup: 4\n", 3, 11,
                 {"YAML syntax error", "end of sequence flow not found"});
}

// Regression: yaml-cpp 0.7's LoadAll loops for ever, allocating, on a ',' at the
// start of a block (upstream issue #1040); the loader must report it instead.
TEST(ConfigTest, StrayCommaAtBlockStartIsASyntaxErrorNotAHang) {
  ExpectOneError(",series:\n  - match: x\n", 1, 1, {"YAML syntax error: unexpected ','"});
  ExpectOneError("series: []\n---\n,\n", 3, 1, {"YAML syntax error: unexpected ','"});
}

TEST(ConfigTest, UnquotedLeadingStarGetsAQuotingHint) {
  std::vector<ConfigError> errors = Errors("series:\n  - match: */temp_c\n");
  ASSERT_EQ(errors.size(), 1u);
  EXPECT_EQ(errors[0].line, 2);
  EXPECT_NE(errors[0].message.find("must be quoted"), std::string::npos)
      << errors[0].message;
}

TEST(ConfigTest, StructuralMistakesAreReported) {
  ExpectOneError("- match: x\n", 1, 1,
                 {"the config must be a mapping with a 'series' key, got a list"});
  ExpectOneError("series:\n  match: x\n", 2, 3,
                 {"series: expected a list of profiles", "got a mapping"});
  ExpectOneError("series:\n  - x\n", 2, 5,
                 {"series: each profile must be a mapping of keys", "got 'x'"});
  ExpectOneError("series:\n  - match: x\n    kind: gauge\n    kind: count\n", 4, 5,
                 {"duplicate key 'kind' (first given at line 3)"});
  ExpectOneError("series: []\n---\nseries: []\n", 2, 1,
                 {"only one YAML document is allowed"});
}

TEST(ConfigTest, ProfileShadowedByAnEarlierOneIsAnError) {
  ExpectOneError(
      "series:\n  - match: \"**\"\n  - match: \"a/*\"\n", 3, 5,
      {"this profile can never match: the profile at line 2 (match \"**\") takes "
       "every series first"});
  ExpectOneError("series:\n  - match: a\n    warmup: 5\n  - match: a\n", 4, 5,
                 {"the profile at line 2 (match \"a\") takes all its series first"});
}

TEST(ConfigTest, EveryErrorIsCollectedInDocumentOrder) {
  const std::string text = R"(series:
  - match: "coldstore/*/temp_c"
    kind: gague
    warmup: lots
  - match: "coldstore/[x"
    silence_after: 15
extra: 1
)";
  std::vector<ConfigError> errors = Errors(text);
  ASSERT_EQ(errors.size(), 5u);
  EXPECT_EQ(errors[0].ToString().substr(0, 16), "test.yaml:3:11: ");
  EXPECT_EQ(errors[1].ToString().substr(0, 16), "test.yaml:4:13: ");
  EXPECT_EQ(errors[2].ToString().substr(0, 16), "test.yaml:5:12: ");
  EXPECT_EQ(errors[3].ToString().substr(0, 16), "test.yaml:6:20: ");
  EXPECT_EQ(errors[4].ToString().substr(0, 15), "test.yaml:7:1: ");
  // The status form carries the same lines.
  StatusOr<Config> loaded = LoadConfigText(text, "test.yaml");
  ASSERT_FALSE(loaded.ok());
  EXPECT_EQ(loaded.status().code(), Status::Code::kInvalidArgument);
  std::string joined;
  for (const ConfigError& e : errors)
    joined += (joined.empty() ? "" : "\n") + e.ToString();
  EXPECT_EQ(loaded.status().message(), joined);
}

TEST(ConfigTest, UnreadableFileIsAnIoErrorWithoutPosition) {
  const std::string path = "/nonexistent-plumbline-dir/config.yaml";
  StatusOr<Config> loaded = LoadConfigFile(path);
  ASSERT_FALSE(loaded.ok());
  EXPECT_EQ(loaded.status().code(), Status::Code::kIoError);
  EXPECT_EQ(loaded.status().message(), path + ": cannot open: No such file or directory");
  Config config;
  std::vector<ConfigError> errors =
      ParseConfigFile(PLUMBLINE_CONFIG_EXAMPLES_DIR, &config);
  ASSERT_EQ(errors.size(), 1u);  // a directory opens but cannot be read
  EXPECT_EQ(errors[0].line, 0);
}

TEST(ConfigTest, DescribeProfileIsOneLineWithEveryGuaranteedKey) {
  const Config config = MustLoad(R"(series:
  - match: "coldstore/*/temp_c"
    seasons: [8h, 1d]
    detectors: [cusum, page-hinkley, bocpd]
    agree: 2
    silence_after: 30m
    arl0: 500000
    shift: 0.25
)");
  EXPECT_EQ(
      DescribeProfile(config.series[0]),
      "coldstore/*/temp_c: gauge, seasons [8h, 1d], gaps skip, warmup 48, arl0 500000, "
      "shift 0.25, detectors [cusum, page-hinkley, bocpd], agree 2 within 5 readings, "
      "silence_after 30m");
}

// ---- The shipped examples ----

std::vector<std::filesystem::path> ExampleFiles() {
  std::vector<std::filesystem::path> files;
  for (const auto& entry :
       std::filesystem::directory_iterator(PLUMBLINE_CONFIG_EXAMPLES_DIR)) {
    if (entry.path().extension() == ".yaml" || entry.path().extension() == ".yml") {
      files.push_back(entry.path());
    }
  }
  std::sort(files.begin(), files.end());
  return files;
}

TEST(ConfigTest, EveryExampleConfigIsValid) {
  const std::vector<std::filesystem::path> files = ExampleFiles();
  EXPECT_GE(files.size(), 2u);
  for (const auto& file : files) {
    Config config;
    std::vector<ConfigError> errors = ParseConfigFile(file.string(), &config);
    for (const ConfigError& e : errors) ADD_FAILURE() << e.ToString();
    EXPECT_FALSE(config.series.empty()) << file;
  }
}

TEST(ConfigTest, MinimalExampleIsTheDesignBlock) {
  StatusOr<Config> config =
      LoadConfigFile(std::string(PLUMBLINE_CONFIG_EXAMPLES_DIR) + "/minimal.yaml");
  ASSERT_TRUE(config.ok()) << config.status().message();
  ASSERT_EQ(config->series.size(), 1u);
  EXPECT_EQ(
      DescribeProfile(config->series[0]),
      "coldstore/*/temp_c: gauge, seasons [1d, 1w], gaps skip, warmup 48, arl0 5000, "
      "shift 1, detectors [cusum, page-hinkley, bocpd], agree 1, silence_after 6h");
}

TEST(ConfigTest, HarboursideExampleGivesEachDemoStreamItsKind) {
  StatusOr<Config> config =
      LoadConfigFile(std::string(PLUMBLINE_CONFIG_EXAMPLES_DIR) + "/harbourside.yaml");
  ASSERT_TRUE(config.ok()) << config.status().message();
  struct Stream {
    const char* name;
    SeriesKind kind;
  };
  // The demo streams of DESIGN.md ("Demo scenario").
  for (const Stream& s :
       {Stream{"coldstore/freezer-1/temp_c", SeriesKind::kGauge},
        Stream{"coldstore/compressor-2/power_kw", SeriesKind::kGauge},
        Stream{"coldstore/dock/door_openings", SeriesKind::kCount},
        Stream{"coldstore/main/energy_kwh", SeriesKind::kMeter},
        Stream{"coldstore/orders/pallets_shipped", SeriesKind::kCount}}) {
    const ProfileOptions* profile = MatchProfile(*config, s.name);
    ASSERT_NE(profile, nullptr) << s.name;
    EXPECT_EQ(profile->kind, s.kind) << s.name;
    EXPECT_NE(profile->match, "coldstore/**")
        << s.name << " fell through to the catch-all";
  }
  const ProfileOptions* freezer = MatchProfile(*config, "coldstore/freezer-1/temp_c");
  EXPECT_EQ(freezer->seasons, (std::vector<EventTime>{8 * kHour, kDay}));
  EXPECT_EQ(freezer->silence_after, std::optional<EventTime>(30 * kMinute));
}

// ---- Robustness ----

TEST(ConfigTest, MangledConfigsNeverCrashAndEveryErrorHasAPosition) {
  // Random byte edits of a valid config: each result either loads or gives
  // errors that all carry a line and column. Seeded, deterministic.
  const std::string base = R"(series:
  - match: "coldstore/*/temp_c"
    kind: gauge
    seasons: [8h, 1d]
    detectors: [cusum, page-hinkley]
    agree: 1
    silence_after: 30m
  - match: "coldstore/**"
    gaps: zero
)";
  const std::string alphabet = " :-[]{},\"'*#\n\t0123456789abcdmswz&!|>";
  Random random(7);
  int failures = 0;
  for (int i = 0; i < 3000; ++i) {
    std::string text = base;
    const int edits = 1 + static_cast<int>(random.Uniform() * 3);
    for (int e = 0; e < edits; ++e) {
      const auto at = static_cast<std::size_t>(random.Uniform() * text.size());
      const char c =
          alphabet[static_cast<std::size_t>(random.Uniform() * alphabet.size())];
      const double u = random.Uniform();
      if (u < 0.4) {
        text[at] = c;
      } else if (u < 0.7) {
        text.insert(text.begin() + static_cast<std::ptrdiff_t>(at), c);
      } else {
        text.erase(at, 1);
      }
    }
    Config config;
    std::vector<ConfigError> errors = ParseConfigText(text, "m.yaml", &config);
    if (errors.empty()) {
      EXPECT_FALSE(config.series.empty());
      continue;
    }
    ++failures;
    for (const ConfigError& e : errors) {
      ASSERT_GE(e.line, 1) << e.ToString() << "\n" << text;
      ASSERT_GE(e.column, 1) << e.ToString() << "\n" << text;
      ASSERT_FALSE(e.message.empty());
    }
  }
  EXPECT_GT(failures, 300);  // the edits do break configs, so the loop checks something
}

}  // namespace
}  // namespace plumbline

namespace plumbline {
namespace {

TEST(ConfigLevelNoiseTest, TakesOffAutoOrANumberAndNamesTheChoicesOtherwise) {
  const Config automatic =
      MustLoad("series:\n  - match: \"a/*\"\n    level_noise: auto\n");
  EXPECT_TRUE(automatic.series[0].level_noise_auto);
  const Config off = MustLoad("series:\n  - match: \"a/*\"\n    level_noise: off\n");
  EXPECT_FALSE(off.series[0].level_noise_auto);
  EXPECT_EQ(off.series[0].level_noise, 0.0);
  ExpectOneError("series:\n  - match: \"a/*\"\n    level_noise: sometimes\n", 3, 18,
                 {"level_noise", "off, auto, or a number", "sometimes"});
  ExpectOneError("series:\n  - match: \"a/*\"\n    level_noise: -2\n", 3, 18,
                 {"level_noise", "[0, 1000]"});
}

}  // namespace
}  // namespace plumbline

namespace plumbline {
namespace {

TEST(ConfigAnnotationTest, PlannedChangesAndMaintenanceWindowsMapOntoAnnotations) {
  const Config config = MustLoad(R"(
series:
  - match: "coldstore/**"
annotations:
  - kind: planned-change
    id: defrost-every-6h
    at: 2026-04-01T00:00:00Z
    match: "coldstore/freezer-1/*"
    direction: up
    within: 2h
    note: defrost every 6 hours from 1 April
  - kind: maintenance
    from: 2026-04-20T08:00:00Z
    to: 2026-04-20T12:00:00Z
    learn: false
)");
  ASSERT_EQ(config.annotations.size(), 2u);
  const Annotation& planned = config.annotations[0];
  EXPECT_EQ(planned.kind, AnnotationKind::kPlannedChange);
  EXPECT_EQ(planned.id, "defrost-every-6h");
  EXPECT_EQ(planned.match, "coldstore/freezer-1/*");
  EXPECT_EQ(planned.direction, Direction::kUp);
  EXPECT_EQ(planned.within, 2 * kHour);
  EXPECT_EQ(planned.at, *ParseTime("2026-04-01T00:00:00Z"));
  const Annotation& window = config.annotations[1];
  EXPECT_EQ(window.kind, AnnotationKind::kMaintenance);
  EXPECT_EQ(window.id, "maintenance-2");  // numbered when no id is given
  EXPECT_EQ(window.match, "**");
  EXPECT_FALSE(window.learn);
  EXPECT_EQ(window.to - window.from, 4 * kHour);
}

TEST(ConfigAnnotationTest, MistakesAreReportedWithTheirPositionAndChoices) {
  ExpectOneError("annotations:\n  - kind: someday\n    at: 2026-04-01T00:00:00Z\n", 2, 11,
                 {"kind: expected planned-change or maintenance", "someday"});
  ExpectOneError("annotations:\n  - kind: planned-change\n    at: soon\n", 3, 9,
                 {"at: expected a time", "soon"});
  ExpectOneError("annotations:\n  - kind: maintenance\n    from: 2026-04-02T00:00:00Z\n",
                 2, 5, {"missing 'to'"});
  ExpectOneError(
      "annotations:\n  - kind: maintenance\n    from: 2026-04-02T00:00:00Z\n"
      "    to: 2026-04-01T00:00:00Z\n",
      4, 9, {"to must come after from"});
  ExpectOneError(
      "annotations:\n  - kind: planned-change\n    at: 2026-04-01T00:00:00Z\n"
      "    direction: sideways\n",
      4, 16, {"direction: expected up, down or any", "sideways"});
  ExpectOneError(
      "annotations:\n  - kind: planned-change\n    at: 2026-04-01T00:00:00Z\n"
      "    wen: 1h\n",
      4, 5, {"wen", "within"});
}

}  // namespace
}  // namespace plumbline
