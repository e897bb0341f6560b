// ServiceMetrics: what the text exposition shows after each kind of update.
// Expected names and formats follow the Prometheus text exposition format
// 0.0.4 and its naming conventions (prometheus.io, "Exposition formats" and
// "Metric and label naming"; from memory).
#include "daemon/metrics.h"

#include <gtest/gtest.h>

#include <sstream>
#include <string>
#include <thread>
#include <vector>

namespace plumbline {
namespace {

// The sample line `name{labels} value` (labels as rendered, "" for none), or
// "" when absent.
std::string SampleValue(const std::string& text, const std::string& series) {
  std::istringstream lines(text);
  std::string line;
  while (std::getline(lines, line)) {
    if (line.rfind(series + " ", 0) == 0) return line.substr(series.size() + 1);
  }
  return "";
}

int CountLinesStartingWith(const std::string& text, const std::string& prefix) {
  std::istringstream lines(text);
  std::string line;
  int n = 0;
  while (std::getline(lines, line)) n += line.rfind(prefix, 0) == 0;
  return n;
}

TEST(ServiceMetricsTest, OptionsRules) {
  std::string why;
  EXPECT_TRUE(ServiceMetricsOptions{}.IsValid(&why));
  EXPECT_FALSE((ServiceMetricsOptions{.shards = 0}.IsValid(&why)));
  EXPECT_NE(why.find("shards"), std::string::npos);
  EXPECT_FALSE((ServiceMetricsOptions{.shards = 1, .max_detector_series = 100001}.IsValid(&why)));
  EXPECT_TRUE((ServiceMetricsOptions{.shards = 1, .max_detector_series = 0}.IsValid(&why)));
}

TEST(ServiceMetricsTest, FreshRegistryDeclaresEveryFamilyWithHelpAndType) {
  ServiceMetrics metrics(ServiceMetricsOptions{.shards = 2});
  const std::string text = metrics.Serialize();
  for (const char* family :
       {"plumbline_readings_accepted_total counter", "plumbline_readings_rejected_total counter",
        "plumbline_readings_late_total counter", "plumbline_alerts_total counter",
        "plumbline_events_total counter", "plumbline_series gauge",
        "plumbline_shard_queue_depth gauge", "plumbline_shard_queue_capacity gauge",
        "plumbline_processing_latency_seconds histogram", "plumbline_detector_series gauge",
        "plumbline_detector_series_refused_total counter", "plumbline_ready gauge",
        "plumbline_http_connections gauge", "plumbline_build_info gauge"}) {
    EXPECT_NE(text.find(std::string("# TYPE ") + family + "\n"), std::string::npos) << family;
  }
  EXPECT_EQ(CountLinesStartingWith(text, "# HELP plumbline_readings_accepted_total "), 1);
  // Every rejection reason and alert kind exists at zero, so rate() works from
  // the first scrape (common practice, no source).
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"bad_time\"}"), "0");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"no_profile\"}"), "0");
  EXPECT_EQ(SampleValue(text, "plumbline_alerts_total{kind=\"silence\"}"), "0");
  EXPECT_EQ(SampleValue(text, "plumbline_shard_queue_depth{shard=\"1\"}"), "0");
  EXPECT_EQ(SampleValue(text, "plumbline_shard_queue_depth{shard=\"2\"}"), "");
}

TEST(ServiceMetricsTest, OutcomesGoToAcceptedLateOrRejectedByReason) {
  ServiceMetrics metrics;
  metrics.CountOutcome(IngestOutcome::kAccepted, 5);
  metrics.CountOutcome(IngestOutcome::kLate);
  metrics.CountOutcome(IngestOutcome::kNoProfile, 2);
  metrics.CountOutcome(IngestOutcome::kTooManySeries);
  metrics.CountRejected(ReadingError::kBadTime, 3);
  metrics.CountRejected("line_too_long");
  metrics.CountRejected("late");  // the engine's name for late goes to the late counter
  metrics.CountRejected("idle_input");  // a reason of an input's own
  const std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_readings_accepted_total"), "5");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_late_total"), "2");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"no_profile\"}"), "2");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"too_many_series\"}"),
            "1");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"bad_time\"}"), "3");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"line_too_long\"}"), "1");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"idle_input\"}"), "1");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"late\"}"), "");
}

TEST(ServiceMetricsTest, AlertsCountByKindAndOtherEventsByType) {
  ServiceMetrics metrics;
  Alert level;
  level.kind = AlertKind::kLevel;
  Alert silence;
  silence.kind = AlertKind::kSilence;
  Alert retrain;
  retrain.event = EventType::kRetrain;
  metrics.CountEvent(level);
  metrics.CountEvent(level);
  metrics.CountEvent(silence);
  metrics.CountEvent(retrain);
  const std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_alerts_total{kind=\"level\"}"), "2");
  EXPECT_EQ(SampleValue(text, "plumbline_alerts_total{kind=\"silence\"}"), "1");
  EXPECT_EQ(SampleValue(text, "plumbline_alerts_total{kind=\"variance\"}"), "0");
  EXPECT_EQ(SampleValue(text, "plumbline_events_total{event=\"retrain\"}"), "1");
}

TEST(ServiceMetricsTest, ShardGaugesAreLabelledAndOutOfRangeShardsIgnored) {
  ServiceMetrics metrics(ServiceMetricsOptions{.shards = 2});
  metrics.SetSeriesCount(0, 12);
  metrics.SetSeriesCount(1, 7);
  metrics.SetQueueDepth(1, 3);
  metrics.SetQueueCapacity(1, 64);
  metrics.SetQueueDepth(2, 99);  // no shard 2: ignored
  const std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_series{shard=\"0\"}"), "12");
  EXPECT_EQ(SampleValue(text, "plumbline_series{shard=\"1\"}"), "7");
  EXPECT_EQ(SampleValue(text, "plumbline_shard_queue_depth{shard=\"1\"}"), "3");
  EXPECT_EQ(SampleValue(text, "plumbline_shard_queue_capacity{shard=\"1\"}"), "64");
  EXPECT_EQ(text.find("shard=\"2\""), std::string::npos);
}

TEST(ServiceMetricsTest, LatencyHistogramHasCumulativeBucketsInSeconds) {
  ServiceMetrics metrics;
  metrics.ObserveProcessingLatency(0.0002);  // 200 us
  metrics.ObserveProcessingLatency(0.003);   // 3 ms
  metrics.ObserveProcessingLatency(20.0);    // beyond the last bound
  const std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_processing_latency_seconds_count"), "3");
  EXPECT_EQ(SampleValue(text, "plumbline_processing_latency_seconds_bucket{le=\"0.0001\"}"), "0");
  EXPECT_EQ(SampleValue(text, "plumbline_processing_latency_seconds_bucket{le=\"0.00025\"}"), "1");
  EXPECT_EQ(SampleValue(text, "plumbline_processing_latency_seconds_bucket{le=\"0.005\"}"), "2");
  EXPECT_EQ(SampleValue(text, "plumbline_processing_latency_seconds_bucket{le=\"10\"}"), "2");
  EXPECT_EQ(SampleValue(text, "plumbline_processing_latency_seconds_bucket{le=\"+Inf\"}"), "3");
  EXPECT_NEAR(std::stod(SampleValue(text, "plumbline_processing_latency_seconds_sum")), 20.0032,
              1e-9);
}

TEST(ServiceMetricsTest, SinkFailuresAreCountedPerSink) {
  ServiceMetrics metrics;
  metrics.CountSinkFailure("webhook");
  metrics.CountSinkFailure("webhook", 2);
  metrics.CountSinkFailure("alert_log");
  const std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_sink_failures_total{sink=\"webhook\"}"), "3");
  EXPECT_EQ(SampleValue(text, "plumbline_sink_failures_total{sink=\"alert_log\"}"), "1");
}

TEST(ServiceMetricsTest, CardinalityGuardAdmitsAtMostTheLimitAndCountsRefusals) {
  ServiceMetrics metrics(ServiceMetricsOptions{.shards = 1, .max_detector_series = 2});
  SeriesGauges* freezer = metrics.AdmitSeries("coldstore/freezer-1/temp_c");
  SeriesGauges* power = metrics.AdmitSeries("coldstore/compressor-2/power_kw");
  ASSERT_NE(freezer, nullptr);
  ASSERT_NE(power, nullptr);
  EXPECT_EQ(metrics.AdmitSeries("coldstore/freezer-1/temp_c"), freezer);  // same series again
  EXPECT_EQ(metrics.AdmitSeries("coldstore/dock/door_openings"), nullptr);
  EXPECT_EQ(metrics.AdmitSeries("coldstore/main/energy_kwh"), nullptr);
  freezer->Set("cusum", 1.25, 4.5);
  freezer->Set("cusum", 2.5, 4.5);  // updates, no new series
  power->Set("bocpd", 0.125, 0.5);
  const std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_detector_statistic{detector=\"cusum\","
                              "series=\"coldstore/freezer-1/temp_c\"}"),
            "2.5");
  EXPECT_EQ(SampleValue(text, "plumbline_detector_threshold{detector=\"cusum\","
                              "series=\"coldstore/freezer-1/temp_c\"}"),
            "4.5");
  EXPECT_EQ(SampleValue(text, "plumbline_detector_statistic{detector=\"bocpd\","
                              "series=\"coldstore/compressor-2/power_kw\"}"),
            "0.125");
  EXPECT_EQ(CountLinesStartingWith(text, "plumbline_detector_statistic{"), 2);
  EXPECT_EQ(text.find("door_openings"), std::string::npos);
  EXPECT_EQ(SampleValue(text, "plumbline_detector_series"), "2");
  EXPECT_EQ(SampleValue(text, "plumbline_detector_series_refused_total"), "2");
  EXPECT_EQ(SampleValue(text, "plumbline_detector_series_limit"), "2");
}

TEST(ServiceMetricsTest, ZeroLimitTurnsPerSeriesGaugesOff) {
  ServiceMetrics metrics(ServiceMetricsOptions{.shards = 1, .max_detector_series = 0});
  EXPECT_EQ(metrics.AdmitSeries("coldstore/freezer-1/temp_c"), nullptr);
  EXPECT_EQ(SampleValue(metrics.Serialize(), "plumbline_detector_series_refused_total"), "1");
}

TEST(ServiceMetricsTest, AtMostEightDetectorsPerSeries) {
  ServiceMetrics metrics;
  SeriesGauges* gauges = metrics.AdmitSeries("coldstore/freezer-1/temp_c");
  ASSERT_NE(gauges, nullptr);
  for (int i = 0; i < 12; ++i) gauges->Set("detector-" + std::to_string(i), i, 10);
  EXPECT_EQ(CountLinesStartingWith(metrics.Serialize(), "plumbline_detector_statistic{"),
            static_cast<int>(ServiceMetricsOptions::kMaxDetectorsPerSeries));
}

TEST(ServiceMetricsTest, LabelValuesAreEscaped) {
  // Series names may hold quotes and backslashes; the exposition format escapes
  // them as \" and \\ (exposition format 0.0.4; from memory).
  ServiceMetrics metrics;
  metrics.AdmitSeries("dock\\door \"east\"")->Set("cusum", 1, 2);
  EXPECT_NE(metrics.Serialize().find("series=\"dock\\\\door \\\"east\\\"\""), std::string::npos);
}

TEST(ServiceMetricsTest, ConcurrentUpdatesFromManyThreadsAreAllCounted) {
  ServiceMetrics metrics(ServiceMetricsOptions{.shards = 4, .max_detector_series = 50});
  std::vector<std::thread> threads;
  for (int t = 0; t < 4; ++t) {
    threads.emplace_back([&metrics, t] {
      for (int i = 0; i < 1000; ++i) {
        metrics.CountOutcome(IngestOutcome::kAccepted);
        metrics.CountRejected(ReadingError::kBadValue);
        metrics.SetQueueDepth(static_cast<std::size_t>(t), static_cast<std::size_t>(i));
        metrics.ObserveProcessingLatency(0.001);
        metrics.CountHttpRequest("readings", 200);
        if (SeriesGauges* g = metrics.AdmitSeries("s/" + std::to_string(i % 100))) {
          g->Set("cusum", i, 5);
        }
        if (i % 100 == 0) metrics.Serialize();
      }
    });
  }
  for (auto& thread : threads) thread.join();
  const std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_readings_accepted_total"), "4000");
  EXPECT_EQ(SampleValue(text, "plumbline_readings_rejected_total{reason=\"bad_value\"}"), "4000");
  EXPECT_EQ(SampleValue(text, "plumbline_processing_latency_seconds_count"), "4000");
  EXPECT_EQ(SampleValue(text, "plumbline_http_requests_total{code=\"200\",route=\"readings\"}"),
            "4000");
  EXPECT_EQ(SampleValue(text, "plumbline_detector_series"), "50");
  // Each call for a refused name counts (callers call once per series). Of
  // 4 x 1000 calls over 100 names (40 calls each), the 50 admitted names (whichever
  // came first) take 50 x 40; the other 2000 calls are refusals.
  EXPECT_EQ(SampleValue(text, "plumbline_detector_series_refused_total"), "2000");
}

TEST(ServiceMetricsTest, DroppedConnectionsAndOverloadCountByInputAndReason) {
  ServiceMetrics metrics;
  metrics.CountConnectionDropped("tcp", "idle_timeout");
  metrics.CountConnectionDropped("tcp", "idle_timeout");
  metrics.CountConnectionDropped("http", "read_timeout");
  metrics.CountOverloaded("http");
  metrics.SetIngestMemoryBudget(1 << 20);
  metrics.SetIngestMemory(4096);
  const std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_connections_dropped_total{input=\"tcp\","
                              "reason=\"idle_timeout\"}"),
            "2");
  EXPECT_EQ(SampleValue(text, "plumbline_connections_dropped_total{input=\"http\","
                              "reason=\"read_timeout\"}"),
            "1");
  EXPECT_EQ(SampleValue(text, "plumbline_ingest_overloaded_total{input=\"http\"}"), "1");
  EXPECT_EQ(SampleValue(text, "plumbline_ingest_memory_budget_bytes"), "1048576");
  EXPECT_EQ(SampleValue(text, "plumbline_ingest_memory_bytes"), "4096");
}

TEST(ServiceMetricsTest, ReadyAndBuildInfo) {
  ServiceMetrics metrics;
  metrics.SetReady(true);
  std::string text = metrics.Serialize();
  EXPECT_EQ(SampleValue(text, "plumbline_ready"), "1");
  EXPECT_NE(text.find("plumbline_build_info{version=\""), std::string::npos);
  metrics.SetReady(false);
  EXPECT_EQ(SampleValue(metrics.Serialize(), "plumbline_ready"), "0");
}

}  // namespace
}  // namespace plumbline
