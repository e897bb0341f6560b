// The broker inputs' pure parts: the MQTT topic->series template, bare-number
// payloads, partition records and their directory store, the config keys,
// and the engine's save-one / forget used when partitions move. The inputs
// against real brokers: tests/e2e/check_kafka.py, tests/e2e/check_mqtt.py.
#include <gtest/gtest.h>

#include <algorithm>
#include <cstdlib>
#include <string>
#include <vector>

#include "config/config.h"
#include "config/stream_options.h"
#include "daemon/checkpoint.h"
#include "daemon/engine.h"
#include "daemon/file_system.h"
#include "daemon/kafka_input.h"
#include "daemon/message_payload.h"

namespace plumbline {
namespace {

TEST(SeriesFromTopicTest, ReplacesTopicAndLevels) {
  EXPECT_EQ(SeriesFromTopic("{topic}", "harbourside/freezer-1/temp_c"),
            "harbourside/freezer-1/temp_c");
  EXPECT_EQ(SeriesFromTopic("coldstore/{2}/{3}", "harbourside/freezer-1/temp_c"),
            "coldstore/freezer-1/temp_c");
  EXPECT_EQ(SeriesFromTopic("{3}-{1}", "a/b/c"), "c-a");
}

TEST(SeriesFromTopicTest, MissingOrEmptyLevelGivesNoName) {
  EXPECT_EQ(SeriesFromTopic("coldstore/{4}", "a/b/c"), "");
  EXPECT_EQ(SeriesFromTopic("coldstore/{2}", "a//c"), "");
}

TEST(MqttInputOptionsTest, RefusesUnknownPlaceholdersAndEmptyFilters) {
  MqttInputOptions o;
  o.host = "127.0.0.1";
  o.topics = {"harbourside/#"};
  std::string why;
  EXPECT_TRUE(o.IsValid(&why)) << why;
  o.series = "coldstore/{site}";
  EXPECT_FALSE(o.IsValid(&why));
  EXPECT_EQ(why.substr(0, 7), "series ");
  o.series = "{topic}";
  o.topics = {""};
  EXPECT_FALSE(o.IsValid(&why));
}

TEST(BareNumberTest, TakesOneFiniteNumberWithBlanksAround) {
  double v = 0;
  EXPECT_TRUE(BareNumber("-18.5", &v));
  EXPECT_EQ(v, -18.5);
  EXPECT_TRUE(BareNumber(" +3e2\r\n", &v));
  EXPECT_EQ(v, 300.0);
  EXPECT_FALSE(BareNumber("", &v));
  EXPECT_FALSE(BareNumber("nan", &v));
  EXPECT_FALSE(BareNumber("inf", &v));
  EXPECT_FALSE(BareNumber("12 kg", &v));
  EXPECT_FALSE(BareNumber("2026-03-01T12:00:00Z,coldstore/a,1", &v));
}

// A record viewing `state`, which outlives it.
CheckpointSeries Record(const std::string& name, const std::string& state) {
  CheckpointSeries s;
  s.name = name;
  s.engine_state = state;
  s.has_extras = true;
  s.readings = 7;
  return s;
}

TEST(PartitionStateTest, RoundTripsOffsetAndSeries) {
  const std::string state_a = "state of coldstore/a", state_b = "state of coldstore/b";
  SnapshotWriter w;
  WriteCheckpointSeries(Record("coldstore/a", state_a), w);
  WriteCheckpointSeries(Record("coldstore/b", state_b), w);
  const std::string record = EncodePartitionState("readings", 7, 12345, w.Take(), 2);
  auto state = DecodePartitionState(record, "readings", 7);
  ASSERT_TRUE(state.ok()) << state.status().ToString();
  EXPECT_EQ(state->next_offset, 12345);
  ASSERT_EQ(state->series.size(), 2u);
  EXPECT_EQ(state->series[1].name, "coldstore/b");
  EXPECT_EQ(state->series[1].engine_state, "state of coldstore/b");
  EXPECT_EQ(state->series[1].readings, 7);
}

TEST(PartitionStateTest, RefusesAnotherPartitionsRecordAndCorruption) {
  const std::string record = EncodePartitionState("readings", 7, 1, "", 0);
  EXPECT_EQ(DecodePartitionState(record, "readings", 8).status().code(),
            Status::Code::kCorruption);
  EXPECT_EQ(DecodePartitionState(record, "other", 7).status().code(),
            Status::Code::kCorruption);
  std::string flipped = record;
  flipped.back() ^= 1;
  EXPECT_FALSE(DecodePartitionState(flipped, "readings", 7).ok());
}

TEST(DirectoryStateStoreTest, SavesAndLoadsPerPartition) {
  char pattern[] = "/tmp/plumbline-partition-store-XXXXXX";
  ASSERT_NE(mkdtemp(pattern), nullptr);
  const std::string directory = std::string(pattern) + "/shared";
  auto store =
      MakeDirectoryStateStore(directory, "group/a", "readings", FileSystem::Default());
  auto none = store->Load({0, 1});
  ASSERT_TRUE(none.ok());
  EXPECT_TRUE(none->empty());
  ASSERT_TRUE(store->Save({{1, "one"}, {3, "three"}}).ok());
  ASSERT_TRUE(store->Save({{1, "one, later"}}).ok());
  auto loaded = store->Load({0, 1, 3});
  ASSERT_TRUE(loaded.ok());
  EXPECT_EQ(loaded->size(), 2u);
  EXPECT_EQ(loaded->at(1), "one, later");
  EXPECT_EQ(loaded->at(3), "three");
  // Another group's store does not see them.
  auto other =
      MakeDirectoryStateStore(directory, "group-b", "readings", FileSystem::Default());
  EXPECT_TRUE(other->Load({1})->empty());
  std::system(("rm -rf " + std::string(pattern)).c_str());
}

TEST(StreamConfigTest, LoadsKafkaMqttAndTheKafkaSink) {
  auto config = LoadConfigText(R"(series:
  - match: "**"
storage: {checkpoint_every: 0}
inputs:
  kafka:
    brokers: "127.0.0.1:9092,127.0.0.1:9093"
    topic: coldstore-readings
    state_topic: plumbline-partition-state
    checkpoint_every: 2s
    start_at: end
  mqtt:
    host: 127.0.0.1
    topics: ["harbourside/+/temp_c"]
    series: "coldstore/{2}/{3}"
sinks:
  kafka: {brokers: "127.0.0.1:9092", topic: plumbline-alerts, min_severity: notify}
)",
                               "test");
  ASSERT_TRUE(config.ok()) << config.status().ToString();
  const ServiceOptions& o = config->service;
  EXPECT_EQ(o.kafka.brokers, "127.0.0.1:9092,127.0.0.1:9093");
  EXPECT_EQ(o.kafka.group, "plumbline");
  EXPECT_EQ(o.kafka.checkpoint_every, 2 * kMicrosPerSecond);
  EXPECT_TRUE(o.kafka.start_at_end);
  EXPECT_EQ(o.mqtt.topics, std::vector<std::string>{"harbourside/+/temp_c"});
  EXPECT_EQ(o.mqtt.port, 1883);
  EXPECT_EQ(o.sinks.kafka.topic, "plumbline-alerts");
  EXPECT_EQ(o.sinks.kafka.min_severity, Severity::kNotify);
}

TEST(StreamConfigTest, KafkaNeedsOneStateStoreAndNoLocalCheckpoints) {
  const std::string base = "series:\n  - match: \"**\"\n";
  auto both = LoadConfigText(base + R"(storage: {checkpoint_every: 0}
inputs:
  kafka: {brokers: b, topic: t, state_topic: s, state_directory: /d}
)",
                             "test");
  ASSERT_FALSE(both.ok());
  EXPECT_NE(both.status().message().find("state_topic or state_directory"),
            std::string::npos);
  auto local = LoadConfigText(base + R"(inputs:
  kafka: {brokers: b, topic: t, state_topic: s}
)",
                              "test");
  ASSERT_FALSE(local.ok());
  EXPECT_NE(local.status().message().find("checkpoint_every must be 0"),
            std::string::npos);
}

// One profile for every series: no season, a short warmup.
Config EveryNameConfig() {
  Config config;
  config.series.push_back(ProfileOptions{});
  config.series.back().match = "**";
  config.series.back().seasons = {};
  config.series.back().warmup = 10;
  return config;
}

TEST(EngineForgetTest, ForgottenSeriesAreGoneAndSavedOnesRestoreAsTheyWere) {
  Engine engine(EveryNameConfig());
  std::vector<Alert> out;
  for (int i = 0; i < 40; ++i) {
    for (const char* name : {"coldstore/a", "coldstore/b"}) {
      engine.Ingest(name, i * kMicrosPerMinute, 20.0 + (i % 3), &out);
    }
  }
  auto saved = engine.SaveOneSeries("coldstore/a");
  ASSERT_TRUE(saved.has_value());
  EXPECT_FALSE(engine.SaveOneSeries("coldstore/unknown").has_value());
  engine.ForgetSeries({"coldstore/a"});
  EXPECT_EQ(engine.Find("coldstore/a"), nullptr);
  EXPECT_NE(engine.Find("coldstore/b"), nullptr);
  ReconfigureReport report;
  ASSERT_TRUE(engine.RestoreSeries("coldstore/a", *saved, &report).ok());
  EXPECT_EQ(report.kept, 1u);
  EXPECT_EQ(engine.SaveOneSeries("coldstore/a"), saved);
}

// Restoring a series the engine already runs (a partition that comes back)
// replaces it; the silence queue must not keep the replaced one (it did: the
// queue held its address, read when the deadline came due). Under ASan a
// dangling entry fails here; without it, the silence must still come once.
TEST(EngineForgetTest, RestoringOverARunningSeriesKeepsOneSilenceAndNoStaleEntry) {
  Config config = EveryNameConfig();
  config.series.back().silence_after = 10 * kMicrosPerMinute;
  Engine engine(config);
  std::vector<Alert> out;
  for (int i = 0; i < 40; ++i) {
    engine.Ingest("coldstore/a", i * kMicrosPerMinute, 20.0 + (i % 3), &out);
  }
  const auto saved = engine.SaveOneSeries("coldstore/a");
  ASSERT_TRUE(saved.has_value());
  ReconfigureReport report;
  ASSERT_TRUE(engine.RestoreSeries("coldstore/a", *saved, &report).ok());
  out.clear();
  engine.AdvanceClock(100 * kMicrosPerMinute, &out);
  const auto silences = std::count_if(out.begin(), out.end(), [](const Alert& a) {
    return a.kind == AlertKind::kSilence && a.event == EventType::kAlert;
  });
  EXPECT_EQ(silences, 1);
}

}  // namespace
}  // namespace plumbline
