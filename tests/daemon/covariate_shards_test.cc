// Covariates under serve (daemon/covariate_groups.h, daemon/shard.h,
// daemon/checkpoint.h): a series and the covariates it reads, transitively,
// land on one shard for any shard count; serve with several shards then
// gives replay's alerts on a stream whose level change a covariate explains;
// and a checkpoint carries the covariate observations, so a restored shard
// joins exactly as an uninterrupted one. The rules are DESIGN.md's ("replay
// ... must give the same alerts as live ingestion") and the headers'; common
// practice, no published source.
#include <gtest/gtest.h>

#include <chrono>
#include <mutex>
#include <set>
#include <string>
#include <thread>
#include <tuple>
#include <vector>

#include "config/config.h"
#include "daemon/checkpoint.h"
#include "daemon/covariate_groups.h"
#include "daemon/engine.h"
#include "daemon/file_system.h"
#include "daemon/shard.h"
#include "detectors/random.h"
#include "tests/support/shard_run.h"
#include "tests/support/temp_dir.h"

namespace plumbline {
namespace {

using testing::AlertKey;
using testing::CollectingPublisher;
using testing::Keys;
using testing::OwnedReading;
using testing::Replay;
using testing::RunShards;

Config Load(const std::string& yaml) {
  auto config = LoadConfigText(yaml, "test.yaml");
  EXPECT_TRUE(config.ok()) << config.status().message();
  return config.ok() ? *config : Config{};
}

// Door openings at any dock read pallets shipped and the outdoor temperature;
// pallets shipped read orders taken (a chain). Compressor power reads its own
// covariate; freezer temperatures read none.
constexpr char kRelated[] =
    "series:\n"
    "  - match: \"coldstore/dock-*/door_openings\"\n    seasons: []\n"
    "    covariates: [coldstore/orders/pallets_shipped, coldstore/site/outdoor_c]\n"
    "  - match: \"coldstore/orders/pallets_shipped\"\n    seasons: []\n"
    "    covariates: [coldstore/orders/orders_taken]\n"
    "  - match: \"coldstore/compressor-2/power_kw\"\n    seasons: []\n"
    "    covariates: [coldstore/compressor-2/load_pct]\n"
    "  - match: \"**\"\n    seasons: []\n";

TEST(CovariateGroupsTest, ASeriesItsCovariatesAndTheirsShareARouteKey) {
  const CovariateGroups groups(Load(kRelated));
  const std::string key = groups.RouteKey("coldstore/orders/orders_taken");
  // The smallest name of the group, whatever the config's order.
  EXPECT_EQ(key, "coldstore/orders/orders_taken");
  for (const char* name :
       {"coldstore/dock-1/door_openings", "coldstore/dock-7/door_openings",
        "coldstore/orders/pallets_shipped", "coldstore/site/outdoor_c"}) {
    EXPECT_EQ(groups.RouteKey(name), key) << name;
    EXPECT_EQ(groups.RouteHash(name), RouteNameHash(key)) << name;
  }
  EXPECT_EQ(groups.RouteKey("coldstore/compressor-2/power_kw"),
            "coldstore/compressor-2/load_pct");
  // Not related to anything: placed by its own name, as without covariates.
  EXPECT_EQ(groups.RouteKey("coldstore/freezer-1/temp_c"), "coldstore/freezer-1/temp_c");
  EXPECT_EQ(groups.RouteHash("coldstore/freezer-1/temp_c"),
            RouteNameHash("coldstore/freezer-1/temp_c"));
  EXPECT_FALSE(groups.empty());
  EXPECT_TRUE(CovariateGroups(Load("series:\n  - match: \"**\"\n")).empty());
}

TEST(CovariateGroupsTest, ReloadThatChangesTheRelationsIsToldApart) {
  const CovariateGroups before(Load(kRelated));
  EXPECT_TRUE(before.SamePlacement(CovariateGroups(Load(kRelated))));
  std::string changed = kRelated;
  changed.replace(changed.find("[coldstore/orders/orders_taken]"),
                  std::string("[coldstore/orders/orders_taken]").size(),
                  "[coldstore/site/outdoor_c]");
  EXPECT_FALSE(before.SamePlacement(CovariateGroups(Load(changed))));
}

TEST(CovariateGroupsTest, ShardSetPlacesEachGroupOnOneShardForAnyShardCount) {
  ManualClock clock;
  const Config config = Load(kRelated);
  const std::vector<std::string> group = {
      "coldstore/dock-1/door_openings", "coldstore/dock-2/door_openings",
      "coldstore/orders/pallets_shipped", "coldstore/orders/orders_taken",
      "coldstore/site/outdoor_c"};
  bool apart_by_name = false;  // the test means something only if names alone split them
  for (std::size_t count = 1; count <= 8; ++count) {
    ShardSet set(count, config, ShardOptions{}, &clock, nullptr, nullptr);
    for (const std::string& name : group) {
      EXPECT_EQ(set.ShardFor(name), set.ShardFor(group.front()))
          << name << " with " << count << " shards";
      if (RouteNameHash(name) % count != RouteNameHash(group.front()) % count) {
        apart_by_name = true;
      }
    }
    EXPECT_EQ(set.ShardFor("coldstore/compressor-2/power_kw"),
              set.ShardFor("coldstore/compressor-2/load_pct"));
    EXPECT_EQ(set.ShardFor("coldstore/freezer-1/temp_c"),
              RouteNameHash("coldstore/freezer-1/temp_c") % count);
  }
  EXPECT_TRUE(apart_by_name);
}

// A stream whose level change the covariate explains: pallets shipped (the
// covariate, every ten minutes) steps up by 6 sd at reading kStep of door
// openings; door openings (every minute) follow 5 + 2 x the latest pallets
// value + noise, so they step by 12 with it.
constexpr char kPallets[] = "coldstore/orders/pallets_shipped";
constexpr char kDoors[] = "coldstore/dock/door_openings";
constexpr long long kReadings = 3000;
constexpr long long kStep = 2000;

std::vector<OwnedReading> CovariateStream() {
  Random rng(20261202);
  const EventTime start = 1'772'323'200LL * kMicrosPerSecond;  // 2026-03-01
  std::vector<OwnedReading> out;
  double pallets = 0.0;
  for (long long i = 0; i < kReadings; ++i) {
    const EventTime t = start + i * kMicrosPerMinute;
    if (i % 10 == 0) {
      pallets = 10.0 + (i >= kStep ? 6.0 : 0.0) + rng.Normal();
      out.push_back({t, kPallets, pallets});
    }
    out.push_back({t, kDoors, 5.0 + 2.0 * pallets + rng.Normal()});
  }
  return out;
}

std::string Profiles(bool with_covariate) {
  return std::string(
             "series:\n"
             "  - match: \"coldstore/orders/*\"\n    seasons: []\n    warmup: 60\n"
             "  - match: \"coldstore/dock/*\"\n    seasons: []\n    warmup: 300\n") +
         (with_covariate ? "    covariates: [coldstore/orders/pallets_shipped]\n"
                           "    covariate_max_age: 30m\n"
                         : "");
}

bool HasLevelAlert(const std::vector<Alert>& alerts, const std::string& series) {
  for (const Alert& a : alerts) {
    if (a.series == series && a.event == EventType::kAlert && a.kind == AlertKind::kLevel)
      return true;
  }
  return false;
}



TEST(CovariateShardsTest, TheStreamsLevelChangeIsExplainedByItsCovariate) {
  const std::vector<OwnedReading> readings = CovariateStream();
  // The premise of the next test: without the covariate the step alerts;
  // with it, it does not (the pallets' own step still does).
  EXPECT_TRUE(HasLevelAlert(Replay(Load(Profiles(false)), readings), kDoors));
  const std::vector<Alert> with = Replay(Load(Profiles(true)), readings);
  EXPECT_FALSE(HasLevelAlert(with, kDoors));
  EXPECT_TRUE(HasLevelAlert(with, kPallets));
}

TEST(CovariateShardsTest, ServeGivesReplaysAlertsForAnyShardCount) {
  const Config config = Load(Profiles(true));
  const std::vector<OwnedReading> readings = CovariateStream();
  const std::multiset<AlertKey> expected = Keys(Replay(config, readings));
  ASSERT_FALSE(expected.empty());
  bool apart_by_name = false;
  for (std::size_t shards : {1u, 2u, 3u, 4u, 5u}) {
    if (RouteNameHash(kDoors) % shards != RouteNameHash(kPallets) % shards)
      apart_by_name = true;
    ManualClock clock;  // never advanced: a fast feed of old readings
    EXPECT_EQ(Keys(RunShards(config, readings, shards, &clock)), expected)
        << shards << " shards";
  }
  EXPECT_TRUE(apart_by_name);  // some count would have split them by name
}

// Runs readings [from, to) through `shard` and waits until it judged them.
void Feed(Shard& shard, const std::vector<OwnedReading>& readings, std::size_t from,
          std::size_t to) {
  const std::uint64_t done = shard.processed() + (to - from);
  ReadingBatch batch;
  for (std::size_t i = from; i < to; ++i) {
    batch.Add({readings[i].time, readings[i].series, readings[i].value}, i + 1);
    if (batch.full()) {
      ASSERT_TRUE(shard.Push(&batch));
    }
  }
  if (!batch.empty()) {
    ASSERT_TRUE(shard.Push(&batch));
  }
  for (int i = 0; i < 20000 && shard.processed() < done; ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(1));
  }
  ASSERT_EQ(shard.processed(), done);
}

// A checkpoint of the shard's series, framed and parsed back as a restart
// reads it; its records view `file`.
struct TakenCheckpoint {
  std::string file;
  Checkpoint checkpoint;
};
std::unique_ptr<TakenCheckpoint> TakeCheckpoint(Shard& shard) {
  auto records = shard.Ask<std::pair<std::vector<std::string>, std::uint64_t>>(
      [](ShardState& state) {
        std::vector<std::string> pieces;
        std::uint64_t count = 0;
        state.SaveSeries(0, &pieces, &count);
        return std::make_pair(std::move(pieces), count);
      },
      std::chrono::seconds(30));
  EXPECT_TRUE(records);
  std::string payload = CheckpointPayloadHead(CheckpointHead{}, records->second);
  for (const std::string& piece : records->first) payload += piece;
  auto taken = std::make_unique<TakenCheckpoint>();
  taken->file = FrameCheckpoint(payload, 1);
  auto framed = UnframeCheckpoint(taken->file);
  EXPECT_TRUE(framed.ok()) << framed.status().message();
  auto parsed = ParseCheckpointPayload(framed->payload, framed->version);
  EXPECT_TRUE(parsed.ok()) << parsed.status().message();
  if (parsed.ok()) taken->checkpoint = std::move(parsed).value();
  return taken;
}

void Restore(Shard& shard, const Checkpoint& checkpoint) {
  auto restored = shard.Ask<bool>(
      [&checkpoint](ShardState& state) {
        ReconfigureReport report;
        for (const CheckpointSeries& s : checkpoint.series) {
          if (!state.RestoreSeries(s, 0, &report).ok()) return false;
        }
        return report.kept == checkpoint.series.size();
      },
      std::chrono::seconds(30));
  ASSERT_TRUE(restored && *restored);
}

std::string SeriesState(Shard& shard, const std::string& name) {
  auto state = shard.Ask<std::string>(
      [&name](ShardState& s) { return s.engine().SaveOneSeries(name).value_or(""); },
      std::chrono::seconds(30));
  return state.value_or("");
}

TEST(CovariateShardsTest, CheckpointCarriesTheCovariateObservations) {
  const Config config = Load(Profiles(true));
  const std::vector<OwnedReading> readings = CovariateStream();
  // Cut between two pallet readings: the door openings after the cut join
  // the pallets reading before it, which only the checkpoint still holds.
  std::size_t cut = 0;
  while (!(readings[cut].time >= readings.front().time + 2205 * kMicrosPerMinute))
    ++cut;
  ASSERT_EQ(readings[cut].series, kDoors);

  ManualClock clock;
  CollectingPublisher whole_alerts, restored_alerts, forgetful_alerts;
  Shard whole(0, config, ShardOptions{}, &clock, &whole_alerts, nullptr);
  whole.Start();
  Feed(whole, readings, 0, cut);
  const std::unique_ptr<TakenCheckpoint> taken = TakeCheckpoint(whole);
  const Checkpoint& checkpoint = taken->checkpoint;
  ASSERT_EQ(checkpoint.series.size(), 2u);
  const std::vector<CovariateObservation>* pallets = nullptr;
  for (const CheckpointSeries& s : checkpoint.series) {
    if (s.name == kPallets) pallets = &s.covariate_history;
    if (s.name == kDoors) {
      EXPECT_TRUE(s.covariate_history.empty());  // no one reads it
    }
  }
  ASSERT_NE(pallets, nullptr);
  ASSERT_EQ(pallets->size(), 221u);  // minutes 0, 10, ..., 2200 (kDepth is 256)
  EXPECT_EQ(pallets->back().t, readings.front().time + 2200 * kMicrosPerMinute);

  // A restored shard, and one restored from a checkpoint without the
  // observations (what a version-1 checkpoint held).
  Shard restored(0, config, ShardOptions{}, &clock, &restored_alerts, nullptr);
  restored.Start();
  Restore(restored, checkpoint);
  Checkpoint without = checkpoint;
  for (CheckpointSeries& s : without.series) s.covariate_history.clear();
  Shard forgetful(0, config, ShardOptions{}, &clock, &forgetful_alerts, nullptr);
  forgetful.Start();
  Restore(forgetful, without);

  Feed(whole, readings, cut, readings.size());
  Feed(restored, readings, cut, readings.size());
  Feed(forgetful, readings, cut, readings.size());
  // Bit for bit the uninterrupted run's state; without the observations the
  // joins after the cut read the running mean instead, and the state differs.
  EXPECT_EQ(SeriesState(restored, kDoors), SeriesState(whole, kDoors));
  EXPECT_NE(SeriesState(forgetful, kDoors), SeriesState(whole, kDoors));
  whole.CloseInput();
  restored.CloseInput();
  forgetful.CloseInput();
  whole.Join();
  restored.Join();
  forgetful.Join();
  std::vector<Alert> after_cut;
  for (const Alert& a : whole_alerts.alerts()) {
    if (a.detected_at >= readings[cut].time) after_cut.push_back(a);
  }
  EXPECT_EQ(Keys(restored_alerts.alerts()), Keys(after_cut));
}

TEST(CheckpointFormatTest, VersionOneRecordsAreReadWithoutCovariateObservations) {
  CheckpointSeries s;
  s.name = kDoors;
  s.engine_state = "state";
  s.has_extras = true;
  s.readings = 7;
  s.newest = 42;
  SnapshotWriter w;
  WriteCheckpointSeries(s, w);
  std::string v2 = CheckpointPayloadHead(CheckpointHead{}, 1) + w.Take();
  // Version 1 wrote the same record without the observation count (8 zero
  // bytes at its end).
  ASSERT_EQ(v2.substr(v2.size() - 8), std::string(8, '\0'));
  const std::string v1 = v2.substr(0, v2.size() - 8);
  auto old = ParseCheckpointPayload(v1, 1);
  ASSERT_TRUE(old.ok()) << old.status().message();
  ASSERT_EQ(old->series.size(), 1u);
  EXPECT_EQ(old->series[0].name, kDoors);
  EXPECT_EQ(old->series[0].readings, 7);
  EXPECT_EQ(old->series[0].newest, 42);
  EXPECT_TRUE(old->series[0].covariate_history.empty());
  EXPECT_FALSE(ParseCheckpointPayload(v1, 2).ok());  // cut short in version 2
  EXPECT_TRUE(ParseCheckpointPayload(v2, 2).ok());
  EXPECT_FALSE(ParseCheckpointPayload(v2, 3).ok());  // a version this build does not read
}

TEST(CheckpointFormatTest, FrameHasTheDocumentedLayout) {
  // daemon/checkpoint.h: "PLUMBCKP", u32 version, u32 CRC-32C of the rest,
  // u64 generation, u64 payload length, payload (little-endian).
  const std::string whole = "PLCK head" + std::string(1000, 'a') + "tail";
  const std::string framed = FrameCheckpoint(whole, 9);
  ASSERT_EQ(framed.size(), 32 + whole.size());
  EXPECT_EQ(framed.substr(0, 8), "PLUMBCKP");
  SnapshotWriter rest;
  rest.U64(9);
  rest.U64(whole.size());
  const std::uint32_t crc = Crc32c(rest.bytes() + whole);
  for (int i = 0; i < 4; ++i) {
    EXPECT_EQ(static_cast<unsigned char>(framed[12 + i]), (crc >> (8 * i)) & 0xff) << i;
  }
  auto unframed = UnframeCheckpoint(framed);
  ASSERT_TRUE(unframed.ok()) << unframed.status().message();
  EXPECT_EQ(unframed->generation, 9u);
  EXPECT_EQ(unframed->payload, whole);
  std::string flipped = framed;
  flipped.back() ^= 1;
  EXPECT_FALSE(UnframeCheckpoint(flipped).ok());
}

TEST(CheckpointFormatTest, StoreWritesPiecesAsTheFrameOfTheirConcatenation) {
  // Save writes the pieces to the file one after the other (no joined copy)
  // and frees them; the file holds exactly the frame of their concatenation.
  const std::string dir = test_support::FreshTempDir("checkpoint_pieces");
  std::vector<std::string> pieces = {"PLCK head", std::string(100000, 'b'), "", "tail"};
  std::string whole;
  for (const std::string& piece : pieces) whole += piece;
  CheckpointStore store(dir, FileSystem::Default());
  ASSERT_TRUE(store.Save(&pieces).ok());
  EXPECT_TRUE(pieces.empty());
  auto file = ReadWholeFile(store.Path(0), 1 << 20);
  ASSERT_TRUE(file.ok()) << file.status().message();
  EXPECT_EQ(*file, FrameCheckpoint(whole, 1));
  std::vector<std::string> skipped;
  CheckpointStore reader(dir, FileSystem::Default());
  auto loaded = reader.Load(&skipped);
  ASSERT_TRUE(loaded.ok()) << loaded.status().message();
  EXPECT_EQ(loaded->payload, whole);
  EXPECT_TRUE(skipped.empty());
}

TEST(CheckpointFormatTest, ObservationsRoundTripAndForgedOnesAreRefused) {
  CheckpointSeries s;
  s.name = kPallets;
  s.covariate_history = {{60, 10.5}, {120, -3.25}, {180, 0.0}};
  SnapshotWriter w;
  WriteCheckpointSeries(s, w);
  const std::string record = w.Take();
  auto parsed = ParseCheckpointPayload(CheckpointPayloadHead(CheckpointHead{}, 1) + record);
  ASSERT_TRUE(parsed.ok()) << parsed.status().message();
  EXPECT_EQ(parsed->series.at(0).covariate_history, s.covariate_history);
  // A forged count beyond the board's depth is refused before allocating.
  s.covariate_history.assign(CovariateBoard::kDepth + 1, {1, 1.0});
  SnapshotWriter big;
  WriteCheckpointSeries(s, big);
  EXPECT_FALSE(
      ParseCheckpointPayload(CheckpointPayloadHead(CheckpointHead{}, 1) + big.Take()).ok());
}

}  // namespace
}  // namespace plumbline
