// Shards (daemon/shard.h): the live engine gives the decisions `replay` gives
// on the same readings, whatever the shard count; a full queue blocks its
// producer; silence comes from the wall clock only once readings stop; a
// reload keeps the state of series whose settings did not change. The rules
// are DESIGN.md's ("Data flow", "Time is event time") and the header's;
// common practice, no published source.
#include "daemon/shard.h"

#include <gtest/gtest.h>

#include <atomic>
#include <fstream>
#include <mutex>
#include <set>
#include <sstream>
#include <string>
#include <thread>
#include <tuple>
#include <vector>

#include "config/config.h"
#include "daemon/reading_parser.h"
#include "detectors/time_format.h"
#include "tests/support/shard_run.h"
#include "tests/support/synthetic_stream.h"

namespace plumbline {
namespace {

using testing::AlertKey;
using testing::CollectingPublisher;
using testing::Keys;
using testing::OwnedReading;
using testing::Replay;
using testing::RunShards;

std::vector<OwnedReading> ReadFixture(const std::string& path) {
  std::ifstream file(path);
  std::stringstream text;
  text << file.rdbuf();
  std::vector<OwnedReading> out;
  ReadingParser parser({}, [&](const Reading& r) {
    out.push_back({r.time, std::string(r.series), r.value});
  });
  parser.Feed(text.str());
  parser.Finish();
  return out;
}


TEST(ShardTest, DemoThroughShardsGivesReplaysEventsForAnyShardCount) {
  const std::string fixture = PLUMBLINE_FIXTURES_DIR "/harbourside";
  auto config = LoadConfigFile(fixture + "/plumbline.yaml");
  ASSERT_TRUE(config.ok()) << config.status().message();
  const std::vector<OwnedReading> readings = ReadFixture(fixture + "/readings.csv");
  ASSERT_GT(readings.size(), 100000u);
  const std::multiset<AlertKey> expected = Keys(Replay(*config, readings));
  ASSERT_GT(expected.size(), 10u);
  ManualClock clock;  // never advanced: a fast feed of old readings
  // 2 and 4 shards would split door openings from pallets shipped, their
  // covariate, by name alone (daemon/covariate_groups.h keeps them together).
  for (std::size_t shards : {1u, 2u, 4u}) {
    EXPECT_EQ(Keys(RunShards(*config, readings, shards, &clock)), expected)
        << shards << " shards";
  }
}

Config OneProfile(const std::string& yaml) {
  auto config = LoadConfigText(yaml, "test.yaml");
  EXPECT_TRUE(config.ok()) << config.status().message();
  return *config;
}

constexpr char kGaugeProfile[] =
    "series:\n  - match: \"**\"\n    seasons: []\n    warmup: 20\n    silence_after: "
    "30m\n";

std::vector<synthetic::SyntheticReading> Stream(long long count) {
  synthetic::SyntheticStreamOptions o;
  o.spacing = kMicrosPerMinute;
  o.jitter = 0;
  o.gap_probability = 0;
  o.daily_amplitude = 0;
  o.weekly_amplitude = 0;
  o.trend_per_week = 0;
  return synthetic::MakeSyntheticStream(o, count, 7);
}

// Tasks overtake queued batches by design; tests wait for the batches first.
void WaitProcessed(const Shard& shard, std::uint64_t readings) {
  for (int i = 0; i < 20000 && shard.processed() < readings; ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(1));
  }
  ASSERT_GE(shard.processed(), readings);
}

TEST(ShardTest, SilenceComesFromTheWallClockOnceReadingsStop) {
  ManualClock clock;
  CollectingPublisher publisher;
  Shard shard(0, OneProfile(kGaugeProfile), ShardOptions{}, &clock, &publisher, nullptr);
  shard.Start();
  ReadingBatch batch;
  const auto stream = Stream(100);
  for (std::size_t i = 0; i < stream.size(); ++i) {
    batch.Add({stream[i].time, "coldstore/freezer-1/temp_c", stream[i].value}, i + 1);
  }
  ASSERT_TRUE(shard.Push(&batch));
  WaitProcessed(shard, stream.size());
  // The readings span 100 minutes of event time but arrive at once: no silence.
  ASSERT_TRUE(shard.PostTick());
  ASSERT_TRUE(shard.Ask<int>([](ShardState&) { return 0; }, std::chrono::seconds(10)));
  for (const Alert& a : publisher.alerts()) EXPECT_NE(a.kind, AlertKind::kSilence);

  clock.Advance(29 * kMicrosPerMinute);
  ASSERT_TRUE(shard.PostTick());
  ASSERT_TRUE(shard.Ask<int>([](ShardState&) { return 0; }, std::chrono::seconds(10)));
  for (const Alert& a : publisher.alerts()) EXPECT_NE(a.kind, AlertKind::kSilence);

  clock.Advance(2 * kMicrosPerMinute);  // 31 minutes of wall time without a reading
  ASSERT_TRUE(shard.PostTick());
  ASSERT_TRUE(shard.Ask<int>([](ShardState&) { return 0; }, std::chrono::seconds(10)));
  // The tick's alert may reach the publisher just after the Ask returns (seen
  // once in a hundred runs on a loaded machine): wait for it, bounded.
  std::vector<Alert> silences;
  for (int i = 0; i < 5000 && silences.empty(); ++i) {
    if (i > 0) std::this_thread::sleep_for(std::chrono::milliseconds(1));
    silences.clear();
    for (const Alert& a : publisher.alerts()) {
      if (a.kind == AlertKind::kSilence && a.event == EventType::kAlert)
        silences.push_back(a);
    }
  }
  ASSERT_EQ(silences.size(), 1u);
  // Timed from the last reading's event time, as replay would.
  EXPECT_EQ(silences[0].detected_at, stream.back().time + 30 * kMicrosPerMinute);
  EXPECT_EQ(silences[0].change_at, stream.back().time);
  shard.CloseInput();
  shard.Join();
}

TEST(ShardTest, InputsAtDifferentSpeedsDoNotMakeEachOtherSilent) {
  // Two sites replay the same day of history, one far ahead of the other:
  // each series keeps its own event clock, so neither looks silent.
  ManualClock clock;
  CollectingPublisher publisher;
  Shard shard(0, OneProfile(kGaugeProfile), ShardOptions{}, &clock, &publisher, nullptr);
  shard.Start();
  const auto stream = Stream(600);
  ReadingBatch ahead, behind;
  for (std::size_t i = 0; i < stream.size(); ++i) {
    ahead.Add({stream[i].time, "site-1/coldstore/freezer-1/temp_c", stream[i].value},
              i + 1);
  }
  for (std::size_t i = 0; i < stream.size(); ++i) {
    behind.Add({stream[i].time, "site-2/coldstore/freezer-1/temp_c", stream[i].value},
               i + 1);
  }
  ASSERT_TRUE(shard.Push(&ahead));
  ASSERT_TRUE(shard.Push(&behind));
  shard.CloseInput();
  shard.Join();
  for (const Alert& a : publisher.alerts()) {
    EXPECT_NE(a.kind, AlertKind::kSilence)
        << a.series << " " << FormatRfc3339(a.detected_at);
  }
  // A series' own gap still counts: a reading 2 hours after the last one
  // reports the silence at the deadline, then the resume.
  CollectingPublisher gap_publisher;
  Shard gap_shard(0, OneProfile(kGaugeProfile), ShardOptions{}, &clock, &gap_publisher,
                  nullptr);
  gap_shard.Start();
  ReadingBatch gap;
  for (std::size_t i = 0; i < 100; ++i)
    gap.Add({stream[i].time, "a", stream[i].value}, i + 1);
  gap.Add({stream[99].time + 2 * kMicrosPerHour, "a", stream[99].value}, 101);
  ASSERT_TRUE(gap_shard.Push(&gap));
  gap_shard.CloseInput();
  gap_shard.Join();
  std::vector<std::string> events;
  for (const Alert& a : gap_publisher.alerts()) {
    if (a.kind == AlertKind::kSilence) {
      events.push_back(std::string(ToString(a.event)) + "@" +
                       FormatRfc3339(a.detected_at));
    }
  }
  EXPECT_EQ(events,
            (std::vector<std::string>{
                "alert@" + FormatRfc3339(stream[99].time + 30 * kMicrosPerMinute),
                "resume@" + FormatRfc3339(stream[99].time + 2 * kMicrosPerHour)}));
}

TEST(ShardTest, FullQueueBlocksTheProducerUntilTheShardTakesABatch) {
  ManualClock clock;
  ShardOptions options;
  options.queue_batches = 1;
  Shard shard(0, OneProfile(kGaugeProfile), options, &clock, nullptr, nullptr);
  shard.Start();
  // Hold the shard thread in a task, so nothing leaves the queue.
  std::mutex gate;
  gate.lock();
  std::atomic<bool> holding{false};
  ASSERT_TRUE(shard.Post([&](ShardState&) {
    holding = true;
    std::lock_guard<std::mutex> wait(gate);
  }));
  while (!holding) std::this_thread::yield();

  auto one_batch = [] {
    ReadingBatch batch;
    batch.Add({1'772'323'200LL * kMicrosPerSecond, "a", 1.0}, 1);
    return batch;
  };
  ReadingBatch first = one_batch();
  ASSERT_TRUE(shard.Push(&first));  // fills the queue
  EXPECT_EQ(shard.queue_depth(), 1u);
  std::atomic<bool> second_pushed{false};
  std::thread producer([&] {
    ReadingBatch second = one_batch();
    EXPECT_TRUE(shard.Push(&second));
    second_pushed = true;
  });
  // However long we look, the producer stays blocked while the queue is full.
  std::this_thread::sleep_for(std::chrono::milliseconds(50));
  EXPECT_FALSE(second_pushed.load());
  EXPECT_EQ(shard.queue_depth(), 1u);
  gate.unlock();
  producer.join();
  EXPECT_TRUE(second_pushed.load());
  shard.CloseInput();
  shard.Join();
  EXPECT_EQ(shard.processed(), 2u);
}

TEST(ShardTest, BatchesStillQueuedAtTheShutdownDeadlineAreDroppedAndCounted) {
  ManualClock clock;
  Shard shard(0, OneProfile(kGaugeProfile), ShardOptions{}, &clock, nullptr, nullptr);
  shard.Start();
  std::mutex gate;
  gate.lock();
  std::atomic<bool> holding{false};
  ASSERT_TRUE(shard.Post([&](ShardState&) {
    holding = true;
    std::lock_guard<std::mutex> wait(gate);
  }));
  while (!holding) std::this_thread::yield();
  auto ticket = std::make_shared<IngestTicket>();
  for (int b = 0; b < 3; ++b) {
    ReadingBatch batch;
    batch.Add({1'772'323'200LL * kMicrosPerSecond + b, "a", 1.0}, b + 1);
    batch.ticket = ticket;
    ticket->AddBatch();
    ASSERT_TRUE(shard.Push(&batch));
  }
  shard.CloseInput(std::chrono::steady_clock::now() - std::chrono::seconds(1));
  gate.unlock();
  shard.Join();
  EXPECT_EQ(shard.processed(), 0u);
  ASSERT_TRUE(ticket->Wait(std::chrono::seconds(10)));
  EXPECT_EQ(ticket->refused(), 3u);
  EXPECT_EQ(ticket->accepted(), 0u);
}

TEST(ShardTest, ClosedShardRefusesBatchesAndTasks) {
  ManualClock clock;
  Shard shard(0, OneProfile(kGaugeProfile), ShardOptions{}, &clock, nullptr, nullptr);
  shard.Start();
  shard.CloseInput();
  shard.Join();
  ReadingBatch batch;
  batch.Add({0, "a", 1.0}, 1);
  EXPECT_FALSE(shard.Push(&batch));
  EXPECT_EQ(batch.size(), 1u);  // left as it was
  EXPECT_FALSE(shard.Post([](ShardState&) {}));
  EXPECT_FALSE(shard.Ask<int>([](ShardState&) { return 1; }, std::chrono::seconds(1)));
}

TEST(ShardTest, RouterSendsEverySeriesToOneStableShard) {
  ManualClock clock;
  const Config config = OneProfile(kGaugeProfile);
  ShardSet a(4, config, ShardOptions{}, &clock, nullptr, nullptr);
  ShardSet b(4, config, ShardOptions{}, &clock, nullptr, nullptr);
  std::set<std::size_t> used;
  for (int i = 0; i < 200; ++i) {
    const std::string name = "coldstore/room-" + std::to_string(i) + "/temp_c";
    EXPECT_EQ(a.ShardFor(name), b.ShardFor(name));
    EXPECT_LT(a.ShardFor(name), 4u);
    used.insert(a.ShardFor(name));
  }
  EXPECT_EQ(used.size(), 4u);  // 200 names reach every shard
}

TEST(ShardTest, TicketGathersVerdictsWithLineNumbersAcrossShards) {
  ManualClock clock;
  const Config config = OneProfile(
      "series:\n  - match: \"coldstore/**\"\n    seasons: []\n    warmup: 20\n");
  ShardSet set(3, config, ShardOptions{}, &clock, nullptr, nullptr);
  set.Start();
  auto ticket = std::make_shared<IngestTicket>();
  {
    ShardRouter router(&set, ticket);
    const EventTime t0 = 1'772'323'200LL * kMicrosPerSecond;
    for (int i = 0; i < 3000; ++i) {
      const std::string name = "coldstore/room-" + std::to_string(i % 7) + "/temp_c";
      ASSERT_TRUE(router.Add({t0 + i * kMicrosPerSecond, name, 1.0 + i % 3}, i + 1));
    }
    ASSERT_TRUE(router.Add({t0, "office/temp_c", 1.0}, 3001));            // no profile
    ASSERT_TRUE(router.Add({t0, "coldstore/room-0/temp_c", 1.0}, 3002));  // late
  }
  ASSERT_TRUE(ticket->Wait(std::chrono::seconds(30)));
  EXPECT_EQ(ticket->accepted(), 3000u);
  EXPECT_EQ(ticket->refused(), 2u);
  const auto refusals = ticket->first_refusals();
  ASSERT_EQ(refusals.size(), 2u);
  EXPECT_EQ(refusals[0].line, 3001u);
  EXPECT_EQ(refusals[0].reason, "no_profile");
  EXPECT_EQ(refusals[1].line, 3002u);
  EXPECT_EQ(refusals[1].reason, "late");
  set.CloseAndJoin();
}

TEST(IngestTicketTest, KeepsTheLowestLineNumbersInOrder) {
  IngestTicket ticket;
  for (std::uint64_t line : {50, 3, 40, 1, 30, 2, 20, 4, 10, 5, 60, 6}) {
    ticket.Refuse(line, "bad_time");
  }
  EXPECT_EQ(ticket.refused(), 12u);
  std::vector<std::uint64_t> lines;
  for (const auto& r : ticket.first_refusals()) lines.push_back(r.line);
  EXPECT_EQ(lines, (std::vector<std::uint64_t>{1, 2, 3, 4, 5, 6, 10, 20, 30, 40}));
}

// Observations made by each named series, asked on the shard thread.
long long Observations(Shard& shard, const std::string& name) {
  auto n = shard.Ask<long long>(
      [name](ShardState& state) {
        const SeriesMonitor* m = state.engine().Find(name);
        return m ? m->observations() : -1LL;
      },
      std::chrono::seconds(10));
  return n.value_or(-2);
}

// The first level detector's threshold, asked on the shard thread.
double FirstThreshold(Shard& shard, const std::string& name) {
  auto t = shard.Ask<double>(
      [name](ShardState& state) {
        const SeriesMonitor* m = state.engine().Find(name);
        return m ? m->DetectorSnapshots().at(0).threshold : -1.0;
      },
      std::chrono::seconds(10));
  return t.value_or(-2.0);
}

TEST(ShardTest, ReloadKeepsRetunesRestartsOrDropsEachSeriesByWhatChanged) {
  ManualClock clock;
  const Config before = OneProfile(
      "series:\n"
      "  - match: \"coldstore/freezer-*/temp_c\"\n    seasons: []\n    warmup: 20\n"
      "  - match: \"coldstore/compressor-*/power_kw\"\n    seasons: []\n    warmup: 20\n"
      "  - match: \"coldstore/dock/*\"\n    seasons: []\n    warmup: 20\n"
      "  - match: \"coldstore/orders/*\"\n    seasons: []\n    warmup: 20\n");
  Shard shard(0, before, ShardOptions{}, &clock, nullptr, nullptr);
  shard.Start();
  ReadingBatch batch;
  const auto stream = Stream(60);
  const std::vector<std::string> names = {
      "coldstore/freezer-1/temp_c", "coldstore/compressor-2/power_kw",
      "coldstore/dock/door_openings", "coldstore/orders/pallets_shipped"};
  for (const std::string& name : names) {
    for (std::size_t i = 0; i < stream.size(); ++i) {
      batch.Add({stream[i].time, name, stream[i].value}, i + 1);
    }
  }
  ASSERT_TRUE(shard.Push(&batch));
  WaitProcessed(shard, names.size() * stream.size());
  const long long seen = Observations(shard, names[0]);
  ASSERT_GT(seen, 40);
  for (const std::string& name : names)
    EXPECT_EQ(Observations(shard, name), seen) << name;
  const double threshold_before = FirstThreshold(shard, names[1]);

  // Freezer: same settings under a wider glob (kept). Compressor: a new arl0
  // (retuned: its model stays). Dock: a daily season (a new model:
  // restarted). Orders: no profile any more (dropped).
  const Config after = OneProfile(
      "series:\n"
      "  - match: \"coldstore/freezer-*/*\"\n    seasons: []\n    warmup: 20\n"
      "  - match: \"coldstore/compressor-*/power_kw\"\n    seasons: []\n    warmup: 20\n"
      "    arl0: 20000\n"
      "  - match: \"coldstore/dock/*\"\n    seasons: [1d]\n    warmup: 20\n");
  auto report = shard.Ask<ReconfigureReport>(
      [&after](ShardState& state) {
        std::vector<Alert> released;
        return state.Reconfigure(after, &released);
      },
      std::chrono::seconds(30));
  ASSERT_TRUE(report);
  EXPECT_EQ(report->kept, 1u);
  EXPECT_EQ(report->retuned, 1u);
  EXPECT_EQ(report->restarted, 1u);
  EXPECT_EQ(report->dropped, 1u);
  EXPECT_EQ(Observations(shard, names[0]), seen);
  EXPECT_EQ(Observations(shard, names[1]), seen);                // the model carried on
  EXPECT_GT(FirstThreshold(shard, names[1]), threshold_before);  // arl0 up: wider
  EXPECT_EQ(Observations(shard, names[2]), 0);
  EXPECT_EQ(Observations(shard, names[3]), -1);
  auto listed = shard.Ask<std::size_t>([](ShardState& s) { return s.series().size(); },
                                       std::chrono::seconds(10));
  EXPECT_EQ(listed, 3u);  // the dropped series left the API's list too
  // The retuned series goes on taking readings.
  ReadingBatch more;
  const auto later = Stream(70);
  for (std::size_t i = 60; i < later.size(); ++i)
    more.Add({later[i].time, names[1], 1.0}, i);
  ASSERT_TRUE(shard.Push(&more));
  WaitProcessed(shard, names.size() * stream.size() + 10);
  EXPECT_EQ(Observations(shard, names[1]), seen + 10);
  shard.CloseInput();
  shard.Join();
}

}  // namespace
}  // namespace plumbline
