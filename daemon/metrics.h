// ServiceMetrics: the counters, gauges and histogram that `serve` exposes on
// `GET /metrics`, in one prometheus-cpp registry, rendered in the Prometheus
// text exposition format (version 0.0.4).
//
// Thread-safe: every method may be called from any shard or I/O thread. Counter
// and gauge updates of the fixed label sets are lock-free atomics (their
// children are created once, in the constructor); only the per-series detector
// gauges and sinks met for the first time take a mutex.
//
// Names follow the Prometheus conventions (prefix plumbline_, base units,
// counters end in _total, durations in _seconds):
//
//   plumbline_readings_accepted_total               readings that reached a series' model
//   plumbline_readings_rejected_total{reason}       lines and readings refused: the parser's
//                                                   reasons (ReadingError) and the engine's
//                                                   (no_profile, too_many_series, ...)
//   plumbline_readings_late_total                   readings older than their series allows
//                                                   (refused; counted here only, not as rejected)
//   plumbline_alerts_total{kind}                    alerts by kind: level, variance, rate, silence
//   plumbline_events_total{event}                   other events: resume, retrain, meter_reset
//   plumbline_series{shard}                         series held by each shard
//   plumbline_shard_queue_depth{shard}              items waiting in each shard's input queue
//   plumbline_shard_queue_capacity{shard}           the bound of that queue
//   plumbline_processing_latency_seconds            histogram: from an input handing a batch to
//                                                   a shard until the shard has processed it
//   plumbline_sink_failures_total{sink}             failed deliveries or writes, by sink
//   plumbline_detector_statistic{series,detector}   per-series detector statistic  } at most
//   plumbline_detector_threshold{series,detector}   and its decision interval      } max_detector_series
//                                                   (refreshed at each scrape by HttpApi: one
//                                                   ServiceView::GetSeries per admitted series)
//   plumbline_series_calibration{series,figure}     how an armed series' standardised
//                                                   residuals behave (detectors/
//                                                   calibration_health.h): figure =
//                                                   autocorrelation (the whitener's lag-one
//                                                   estimate), variance, lag1, tail_share,
//                                                   drift_ratio (1 = as the thresholds assume);
//                                                   same guard and refresh as the detector gauges
//   plumbline_detector_series                       series that have detector gauges
//   plumbline_detector_series_refused_total         series refused by the cardinality guard
//   plumbline_ready                                 1 when /readyz answers 200, else 0
//   plumbline_http_requests_total{route,code}       HTTP API requests by route and status
//   plumbline_http_connections                      open HTTP connections
//   plumbline_connections_dropped_total{input,reason}  connections the daemon closed or
//                                                   refused: idle_timeout, read_timeout,
//                                                   too_many_connections, unauthorized,
//                                                   tls_handshake
//   plumbline_ingest_memory_bytes                   readings (and HTTP bodies) in flight
//                                                   between the inputs and the shards
//   plumbline_ingest_memory_budget_bytes            its bound (config: ingest_memory)
//   plumbline_ingest_overloaded_total{input}        times an input met a full budget: tcp
//                                                   and file reads paused, HTTP answered 503
//   plumbline_build_info{version}                   always 1
#pragma once

#include <array>
#include <cstddef>
#include <cstdint>
#include <map>
#include <memory>
#include <mutex>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/engine.h"
#include "daemon/reading_parser.h"

namespace prometheus {
class Counter;
class Gauge;
class Histogram;
class Registry;
template <typename T>
class Family;
}  // namespace prometheus

namespace plumbline {

// The content type of ServiceMetrics::Serialize's output.
inline constexpr std::string_view kPrometheusTextContentType =
    "text/plain; version=0.0.4; charset=utf-8";

struct ServiceMetricsOptions {
  // Shards whose series count and queue gauges exist (labels shard="0".."N-1").
  std::size_t shards = 1;
  // Cardinality guard: at most this many series get per-series detector
  // gauges; each has at most kMaxDetectorsPerSeries detectors, so the guard
  // bounds those time series at 2 * 8 * max_detector_series.
  std::size_t max_detector_series = 100;
  static constexpr std::size_t kMaxDetectorsPerSeries = 8;

  // Rules: shards in [1, 1024]; max_detector_series in [0, 100000] (0 turns
  // the per-series gauges off).
  bool IsValid(std::string* why) const;
};

// The detector gauges of one admitted series. Owned by ServiceMetrics and
// valid as long as it. Thread-safe.
class SeriesGauges {
 public:
  // Sets the statistic and the decision interval of `detector` (cusum,
  // page-hinkley, bocpd, ...). A detector beyond the first
  // kMaxDetectorsPerSeries names of this series is ignored.
  void Set(std::string_view detector, double statistic, double threshold);
  // Sets one calibration figure (autocorrelation, variance, lag1, tail_share,
  // drift_ratio); any other name is ignored. NaN (not armed yet) is shown as NaN.
  void SetCalibration(std::string_view figure, double value);
  static constexpr std::array<std::string_view, 5> kCalibrationFigures = {
      "autocorrelation", "variance", "lag1", "tail_share", "drift_ratio"};

 private:
  friend class ServiceMetrics;
  struct Detector {
    std::string name;
    prometheus::Gauge* statistic;
    prometheus::Gauge* threshold;
  };
  SeriesGauges(std::string series, prometheus::Family<prometheus::Gauge>* statistic_family,
               prometheus::Family<prometheus::Gauge>* threshold_family,
               prometheus::Family<prometheus::Gauge>* calibration_family)
      : series_(std::move(series)),
        statistic_family_(statistic_family),
        threshold_family_(threshold_family),
        calibration_family_(calibration_family) {}

  const std::string series_;
  prometheus::Family<prometheus::Gauge>* const statistic_family_;
  prometheus::Family<prometheus::Gauge>* const threshold_family_;
  prometheus::Family<prometheus::Gauge>* const calibration_family_;
  // One per kCalibrationFigures entry, made at the first SetCalibration; guarded by mutex_.
  std::array<prometheus::Gauge*, kCalibrationFigures.size()> calibration_{};
  std::mutex mutex_;                 // guards detectors_
  std::vector<Detector> detectors_;  // at most kMaxDetectorsPerSeries
};

class ServiceMetrics {
 public:
  // Registers every family; throws only on a programming error (a bad name).
  explicit ServiceMetrics(ServiceMetricsOptions options = {});
  ~ServiceMetrics();
  ServiceMetrics(const ServiceMetrics&) = delete;
  ServiceMetrics& operator=(const ServiceMetrics&) = delete;

  // ---- readings ----
  // The engine's verdict on one reading: accepted, late, or rejected with the
  // outcome's name as reason.
  void CountOutcome(IngestOutcome outcome, std::uint64_t n = 1);
  // A line the parser refused.
  void CountRejected(ReadingError reason, std::uint64_t n = 1);
  // A refusal found elsewhere (an input's own rule); `reason` should come from
  // a small fixed set, since each new value creates a time series.
  void CountRejected(std::string_view reason, std::uint64_t n = 1);

  // ---- events ----
  // An alert counts under its kind, another event under its event type.
  void CountEvent(const Alert& alert);

  // ---- shards ----
  // Out-of-range shard indices are ignored.
  void SetSeriesCount(std::size_t shard, std::size_t series);
  void SetQueueDepth(std::size_t shard, std::size_t depth);
  void SetQueueCapacity(std::size_t shard, std::size_t capacity);
  void ObserveProcessingLatency(double seconds);

  // ---- sinks ----
  // `sink` names a configured sink (alert_log, webhook, stdout, ...).
  void CountSinkFailure(std::string_view sink, std::uint64_t n = 1);

  // ---- per-series detector gauges (cardinality guard) ----
  // The gauges of `series`: the same object on every call for an admitted
  // series; a new one while fewer than max_detector_series are admitted;
  // otherwise nullptr, and plumbline_detector_series_refused_total rises by
  // one. Call it once per series (when its shard creates it) and keep the
  // pointer, so each refused series is counted once.
  SeriesGauges* AdmitSeries(std::string_view series);
  // The admitted series, by name, with their gauges (a copy of the list: the
  // pointers stay valid as long as this object).
  std::vector<std::pair<std::string, SeriesGauges*>> AdmittedSeries() const;

  // ---- connections and overload ----
  // `input` is tcp or http; `reason` one of the small fixed set above.
  void CountConnectionDropped(std::string_view input, std::string_view reason);
  void SetIngestMemory(std::size_t bytes);
  void SetIngestMemoryBudget(std::size_t bytes);
  void CountOverloaded(std::string_view input);

  // ---- HTTP ----
  void CountHttpRequest(std::string_view route, unsigned status);
  void SetHttpConnections(std::size_t open);
  void SetReady(bool ready);

  // The text exposition of every metric (format version 0.0.4).
  std::string Serialize() const;
  // For callers that add metrics of their own (names must start with plumbline_).
  prometheus::Registry& registry() { return *registry_; }
  const ServiceMetricsOptions& options() const { return options_; }

 private:
  prometheus::Counter* RejectedCounter(std::string_view reason);

  const ServiceMetricsOptions options_;
  std::shared_ptr<prometheus::Registry> registry_;

  prometheus::Counter* accepted_;
  prometheus::Counter* late_;
  prometheus::Family<prometheus::Counter>* rejected_family_;
  std::array<prometheus::Counter*, kReadingErrorCount> rejected_by_parser_{};
  prometheus::Counter* rejected_no_profile_;
  prometheus::Counter* rejected_not_finite_;
  prometheus::Counter* rejected_too_many_series_;
  std::array<prometheus::Counter*, 4> alerts_by_kind_{};   // index: AlertKind
  std::array<prometheus::Counter*, 4> events_by_type_{};   // index: EventType (kAlert unused)
  std::vector<prometheus::Gauge*> series_;                 // index: shard
  std::vector<prometheus::Gauge*> queue_depth_;            // index: shard
  std::vector<prometheus::Gauge*> queue_capacity_;         // index: shard
  prometheus::Histogram* latency_;
  prometheus::Family<prometheus::Counter>* sink_failures_family_;
  prometheus::Family<prometheus::Gauge>* detector_statistic_family_;
  prometheus::Family<prometheus::Gauge>* detector_threshold_family_;
  prometheus::Family<prometheus::Gauge>* calibration_family_;
  prometheus::Gauge* detector_series_;
  prometheus::Counter* detector_series_refused_;
  prometheus::Family<prometheus::Counter>* http_requests_family_;
  prometheus::Gauge* http_connections_;
  prometheus::Family<prometheus::Counter>* connections_dropped_family_;
  prometheus::Gauge* ingest_memory_;
  prometheus::Gauge* ingest_memory_budget_;
  prometheus::Family<prometheus::Counter>* overloaded_family_;
  prometheus::Gauge* ready_;

  mutable std::mutex series_mutex_;  // guards admitted_
  std::map<std::string, std::unique_ptr<SeriesGauges>, std::less<>> admitted_;
};

}  // namespace plumbline
