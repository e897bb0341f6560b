// Service (daemon/service.h) through its ServiceView: the ingest receipt counts
// and names refused lines by number, the series views answer from the shards,
// alerts are kept for "since" queries, readiness follows the durable sinks,
// and a reload reports what it kept. Also the logger's line format. The rules
// are ServiceView's and DESIGN.md's; common practice, no published source.
#include "daemon/service.h"

#include <gtest/gtest.h>
#include <unistd.h>

#include <atomic>
#include <cmath>
#include <filesystem>
#include <string>
#include <thread>
#include <vector>

#include "daemon/log.h"
#include "detectors/time_format.h"
#include "tests/support/interposed_file_system.h"
#include "tests/support/temp_dir.h"

namespace plumbline {
namespace {

std::string TempDir(const std::string& name) {
  return test_support::FreshTempDir("service_" + name, /*create=*/false);
}

// POSIX, except that fsync fails once told to.
class FailingSyncFileSystem : public test_support::InterposedFileSystem {
 public:
  std::atomic<bool> fail{false};
  FailingSyncFileSystem() {
    before_sync = [this] {
      return fail ? Status::IoError("injected: no space left on device") : Status::Ok();
    };
  }
};

constexpr char kProfiles[] =
    "series:\n"
    "  - match: \"coldstore/**\"\n    seasons: []\n    warmup: 20\n    silence_after: "
    "30m\n";

Config MakeConfig(const std::string& state, const std::string& profiles = kProfiles) {
  auto config = LoadConfigText(profiles, "test.yaml");
  EXPECT_TRUE(config.ok()) << config.status().message();
  config->service.tcp.enabled = false;
  config->service.shards = 2;
  config->service.state_directory = state;
  config->service.sinks.to_stdout = false;
  return *config;
}

std::string Body(const std::string& series, int from, int count, double level) {
  std::string text;
  for (int i = from; i < from + count; ++i) {
    text += FormatRfc3339((1'772'323'200LL + 60 * i) * kMicrosPerSecond) + "," + series +
            "," + std::to_string(level + 0.1 * (i % 5)) + "\n";
  }
  return text;
}

TEST(ServiceTest, IngestReceiptCountsAndNamesRefusedLinesByNumber) {
  ManualClock clock;
  ServiceDependencies deps;
  deps.clock = &clock;
  Service service(MakeConfig(TempDir("receipt")), deps);
  {
    const Status started = service.Start();
    ASSERT_TRUE(started.ok()) << started.message();
  }
  const std::string body =
      "time,series,value\n" + Body("coldstore/freezer-1/temp_c", 0, 50, -20) +
      "garbage\n" +                                              // line 52
      "2026-03-01T02:00:00Z,office/kettle/temp_c,90\n" +         // line 53
      "2026-03-01T00:00:00Z,coldstore/freezer-1/temp_c,-20\n" +  // late
      "\n" + Body("coldstore/freezer-1/temp_c", 50, 10, -20);
  const IngestReceipt receipt = service.IngestLines(body);
  EXPECT_EQ(receipt.accepted, 60u);
  EXPECT_EQ(receipt.rejected, 3u);
  ASSERT_EQ(receipt.first_rejections.size(), 3u);
  EXPECT_EQ(receipt.first_rejections[0].line, 52u);
  EXPECT_EQ(receipt.first_rejections[0].reason, "wrong_field_count");
  EXPECT_EQ(receipt.first_rejections[1].line, 53u);
  EXPECT_EQ(receipt.first_rejections[1].reason, "no_profile");
  EXPECT_EQ(receipt.first_rejections[2].line, 54u);
  EXPECT_EQ(receipt.first_rejections[2].reason, "late");
  // The verdicts are in when IngestLines returns: the views see every reading.
  const auto series = service.ListSeries("");
  ASSERT_EQ(series.size(), 1u);
  EXPECT_EQ(series[0].name, "coldstore/freezer-1/temp_c");
  EXPECT_EQ(series[0].readings, 60);
  EXPECT_EQ(series[0].kind, "gauge");
  EXPECT_TRUE(series[0].armed);
  service.Shutdown();
}

// Lines of an acknowledged stream, readings i in [from, to) of one series.
ReadingBatch StreamBatch(const std::string& series, int from, int to) {
  ReadingBatch batch;
  for (int i = from; i < to; ++i) {
    batch.Add(
        Reading{(1'772'323'200LL + 60 * i) * kMicrosPerSecond, series, 10.0 + i % 3},
        static_cast<std::uint64_t>(i + 1));
  }
  return batch;
}

// Regression: a connection's lines after its last mark are sent again by the
// sender's next connection, and a restart replaying the log took them twice
// (the second copy of a series' newest reading is not late), so the restored
// series differed from one that had never stopped (unpaced serve_crash).
TEST(ServiceTest, RestartLeavesOutStreamBatchesThatAResumeFollows) {
  const std::string state = TempDir("resume");
  std::filesystem::create_directories(state);
  const std::string name = "coldstore/freezer-1/temp_c";
  {
    WriteAheadLog wal(state, FileSystem::Default());
    ASSERT_TRUE(wal.Start(1).ok());
    wal.AppendResume("feed", 0);
    wal.AppendBatch(StreamBatch(name, 0, 10), "feed");
    wal.AppendMark("feed", 10);
    wal.AppendBatch(StreamBatch(name, 10, 15), "feed");  // never acknowledged
    wal.AppendResume("feed", 10);                        // the sender reconnects
    wal.AppendBatch(StreamBatch(name, 10, 15), "feed");  // and sends them again
    wal.AppendMark("feed", 15);
    wal.AppendBatch(StreamBatch(name, 15, 18), "feed");  // never acknowledged
    ASSERT_TRUE(wal.WaitDurable(wal.next_sequence() - 1, std::chrono::seconds(10)));
  }
  Service service(MakeConfig(state), ServiceDependencies{});
  {
    const Status started = service.Start();
    ASSERT_TRUE(started.ok()) << started.message();
  }
  const auto detail = service.GetSeries(name);
  ASSERT_TRUE(detail);
  EXPECT_EQ(detail->summary.readings, 15);
  EXPECT_EQ(detail->summary.last_time, (1'772'323'200LL + 60 * 14) * kMicrosPerSecond);
  service.Shutdown();
}

TEST(ServiceTest, SeriesViewsFilterByGlobAndDescribeOneSeries) {
  ManualClock clock;
  ServiceDependencies deps;
  deps.clock = &clock;
  Config config = MakeConfig(TempDir("views"));
  config.service.recent_points = 32;  // fewer than the readings: the ring is full
  Service service(config, deps);
  {
    const Status started = service.Start();
    ASSERT_TRUE(started.ok()) << started.message();
  }
  for (const char* name : {"coldstore/freezer-1/temp_c", "coldstore/freezer-2/temp_c",
                           "coldstore/compressor-2/power_kw"}) {
    ASSERT_EQ(service.IngestLines(Body(name, 0, 80, 10)).accepted, 80u);
  }
  const auto freezers = service.ListSeries("coldstore/freezer-*/temp_c");
  ASSERT_EQ(freezers.size(), 2u);
  EXPECT_EQ(freezers[0].name, "coldstore/freezer-1/temp_c");  // sorted
  EXPECT_EQ(freezers[1].name, "coldstore/freezer-2/temp_c");
  EXPECT_EQ(service.ListSeries("**").size(), 3u);

  const auto detail = service.GetSeries("coldstore/compressor-2/power_kw");
  ASSERT_TRUE(detail);
  EXPECT_EQ(detail->summary.readings, 80);
  EXPECT_EQ(detail->summary.last_time, (1'772'323'200LL + 60 * 79) * kMicrosPerSecond);
  EXPECT_GT(detail->sigma, 0.0);
  EXPECT_LT(detail->band_low, detail->forecast);
  EXPECT_GT(detail->band_high, detail->forecast);
  ASSERT_EQ(detail->recent_points.size(), 32u);  // the newest, oldest first
  EXPECT_EQ(detail->recent_points.back().time, detail->summary.last_time);
  EXPECT_LT(detail->recent_points.front().time, detail->recent_points.back().time);
  // Armed after warmup: each point carries the forecast made before it, and a band.
  EXPECT_EQ(detail->summary.state, SeriesState::kSteady);
  for (const SeriesDetail::Point& p : detail->recent_points) {
    ASSERT_TRUE(std::isfinite(p.forecast));
    EXPECT_LT(p.band_low, p.forecast);
    EXPECT_GT(p.band_high, p.forecast);
  }
  EXPECT_FALSE(service.GetSeries("coldstore/nothing"));
  service.Shutdown();
}

TEST(ServiceTest, AlertsAreKeptForSinceQueries) {
  ManualClock clock;
  ServiceDependencies deps;
  deps.clock = &clock;
  Service service(MakeConfig(TempDir("alerts")), deps);
  {
    const Status started = service.Start();
    ASSERT_TRUE(started.ok()) << started.message();
  }
  ASSERT_EQ(service.IngestLines(Body("coldstore/freezer-1/temp_c", 0, 100, -20)).accepted,
            100u);
  // Another series' readings an hour later do not make the freezer silent
  // (each series has its own event clock)...
  ASSERT_EQ(service.IngestLines(Body("coldstore/freezer-2/temp_c", 160, 1, -20)).accepted,
            1u);
  // ...but 31 minutes of wall time without readings do: each silence is
  // reported at its series' last reading + 30 minutes (minutes 129 and 190).
  clock.Advance(31 * kMicrosPerMinute);
  std::vector<Alert> alerts;
  for (int i = 0; i < 20000 && alerts.size() < 2; ++i) {
    alerts = service.AlertsSince(0);
    std::this_thread::sleep_for(std::chrono::milliseconds(1));
  }
  ASSERT_EQ(alerts.size(), 2u);
  const EventTime minute_129 = (1'772'323'200LL + 60 * 129) * kMicrosPerSecond;
  const EventTime minute_190 = (1'772'323'200LL + 60 * 190) * kMicrosPerSecond;
  EXPECT_EQ(alerts[0].kind, AlertKind::kSilence);  // ordered by detected_at
  EXPECT_EQ(alerts[0].series, "coldstore/freezer-1/temp_c");
  EXPECT_EQ(alerts[0].detected_at, minute_129);
  EXPECT_EQ(alerts[1].series, "coldstore/freezer-2/temp_c");
  EXPECT_EQ(alerts[1].detected_at, minute_190);
  EXPECT_EQ(service.AlertsSince(minute_129).size(), 2u);
  ASSERT_EQ(service.AlertsSince(minute_129 + 1).size(), 1u);
  EXPECT_EQ(service.AlertsSince(minute_129 + 1)[0].series, "coldstore/freezer-2/temp_c");
  service.Shutdown();
}

TEST(ServiceTest, NotReadyOnceTheAlertLogFailsAndSaysWhy) {
  ManualClock clock;
  FailingSyncFileSystem fs;
  ServiceDependencies deps;
  deps.clock = &clock;
  deps.file_system = &fs;
  Service service(MakeConfig(TempDir("ready")), deps);
  std::string why;
  EXPECT_FALSE(service.Ready(&why));
  EXPECT_EQ(why, "starting");
  const IngestReceipt early = service.IngestLines("a\nb\nc");
  EXPECT_EQ(early.accepted, 0u);
  EXPECT_EQ(early.rejected, 3u);
  ASSERT_EQ(early.first_rejections.size(), 1u);
  EXPECT_EQ(early.first_rejections[0].reason, "starting");
  {
    const Status started = service.Start();
    ASSERT_TRUE(started.ok()) << started.message();
  }
  EXPECT_TRUE(service.Ready(&why)) << why;
  fs.fail = true;
  // A silence alert reaches the alert log, whose fsync now fails.
  service.IngestLines(Body("coldstore/freezer-1/temp_c", 0, 30, -20) +
                      Body("coldstore/freezer-1/temp_c", 100, 1, -20));
  // The write-ahead log fails first (not ready at once); wait (up to 20 s) for the
  // alert log's failure, which the reason names before any other.
  for (int i = 0; i < 20000 && (service.Ready(&why) || why.find("alert log") == std::string::npos);
       ++i) {
    std::this_thread::sleep_for(std::chrono::milliseconds(1));
  }
  EXPECT_FALSE(service.Ready(&why));
  EXPECT_NE(why.find("alert log"), std::string::npos) << why;
  EXPECT_NE(why.find("no space left"), std::string::npos) << why;
  service.Shutdown();
  EXPECT_FALSE(service.Ready(&why));
  EXPECT_EQ(why, "shutting down");
}

TEST(ServiceTest, ReloadKeepsStateAndReportsServiceSettingsThatNeedARestart) {
  ManualClock clock;
  ServiceDependencies deps;
  deps.clock = &clock;
  const std::string state = TempDir("reload");
  Service service(MakeConfig(state), deps);
  {
    const Status started = service.Start();
    ASSERT_TRUE(started.ok()) << started.message();
  }
  ASSERT_EQ(service.IngestLines(Body("coldstore/freezer-1/temp_c", 0, 50, -20)).accepted,
            50u);
  Config next = MakeConfig(state);
  next.service.shards = 3;
  auto report = service.Reload(next);
  ASSERT_TRUE(report.ok()) << report.status().message();
  EXPECT_EQ(report->series.kept, 1u);
  EXPECT_EQ(report->series.restarted, 0u);
  ASSERT_EQ(report->ignored.size(), 1u);
  EXPECT_NE(report->ignored[0].find("shards: 3"), std::string::npos)
      << report->ignored[0];
  EXPECT_EQ(service.shard_count(), 2u);  // unchanged until a restart
  EXPECT_EQ(service.ListSeries("")[0].readings, 50);
  service.Shutdown();
  EXPECT_FALSE(service.Reload(next).ok());  // not running any more
}

TEST(ServiceTest, StartFailsCleanlyWhenTheStateDirectoryCannotBeMade) {
  Service service(MakeConfig("/proc/plumbline-cannot-be-here"));
  const Status status = service.Start();
  EXPECT_FALSE(status.ok());
  EXPECT_NE(status.message().find("/proc/plumbline-cannot-be-here"), std::string::npos);
}

TEST(LogTest, LinesAreLogfmtWithQuotedValuesWhereNeeded) {
  EXPECT_EQ(
      FormatLogFields(LogLevel::kWarning, "line refused",
                      {{"input", "tcp"},
                       {"line", 12},
                       {"detail", "say \"hi\"\n"},
                       {"empty", ""},
                       {"ok", true}}),
      "level=warning msg=\"line refused\" input=tcp line=12 detail=\"say \\\"hi\\\"\\n\" "
      "empty=\"\" ok=true");
  std::vector<std::string> lines;
  SetLogWriter([&](std::string_view line) { lines.emplace_back(line); });
  SetLogLevel(LogLevel::kWarning);
  LogInfo("dropped");
  LogError("kept", {{"x", 1.5}});
  SetLogLevel(LogLevel::kInfo);
  SetLogWriter(nullptr);
  ASSERT_EQ(lines.size(), 1u);
  EXPECT_EQ(lines[0].rfind("ts=", 0), 0u);
  EXPECT_NE(lines[0].find(" level=error msg=kept x=1.5"), std::string::npos) << lines[0];
  for (LogLevel level :
       {LogLevel::kDebug, LogLevel::kInfo, LogLevel::kWarning, LogLevel::kError}) {
    EXPECT_EQ(LogLevelFromString(ToString(level)), level);
  }
  EXPECT_FALSE(LogLevelFromString("loud"));
}

}  // namespace
}  // namespace plumbline
