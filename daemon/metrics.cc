#include "daemon/metrics.h"

#include <prometheus/counter.h>
#include <prometheus/family.h>
#include <prometheus/gauge.h>
#include <prometheus/histogram.h>
#include <prometheus/registry.h>
#include <prometheus/text_serializer.h>

#include "detectors/series_monitor.h"
#include "plumbline_version.h"

namespace plumbline {
namespace {

// Processing-latency buckets in seconds: 50 us to 10 s, about three per decade,
// so both a healthy shard (sub-millisecond) and a backlogged one are resolved.
const prometheus::Histogram::BucketBoundaries kLatencyBuckets = {
    0.00005, 0.0001, 0.00025, 0.0005, 0.001, 0.0025, 0.005, 0.01,
    0.025,   0.05,   0.1,     0.25,   0.5,   1.0,    2.5,   5.0, 10.0};

constexpr AlertKind kAlertKinds[] = {AlertKind::kLevel, AlertKind::kVariance,
                                     AlertKind::kRate, AlertKind::kSilence};
constexpr EventType kOtherEvents[] = {EventType::kResume, EventType::kRetrain,
                                      EventType::kMeterReset};

template <typename T>
T* PerShard(const std::vector<T*>& gauges, std::size_t shard) {
  return shard < gauges.size() ? gauges[shard] : nullptr;
}

}  // namespace

bool ServiceMetricsOptions::IsValid(std::string* why) const {
  if (shards < 1 || shards > 1024) {
    if (why) *why = "shards must be in [1, 1024]";
    return false;
  }
  if (max_detector_series > 100000) {
    if (why) *why = "max_detector_series must be in [0, 100000]";
    return false;
  }
  return true;
}

void SeriesGauges::Set(std::string_view detector, double statistic, double threshold) {
  std::lock_guard<std::mutex> lock(mutex_);
  Detector* entry = nullptr;
  for (Detector& d : detectors_) {
    if (d.name == detector) {
      entry = &d;
      break;
    }
  }
  if (entry == nullptr) {
    if (detectors_.size() >= ServiceMetricsOptions::kMaxDetectorsPerSeries) return;
    const prometheus::Labels labels = {{"series", series_}, {"detector", std::string(detector)}};
    detectors_.push_back(Detector{std::string(detector), &statistic_family_->Add(labels),
                                  &threshold_family_->Add(labels)});
    entry = &detectors_.back();
  }
  entry->statistic->Set(statistic);
  entry->threshold->Set(threshold);
}

void SeriesGauges::SetCalibration(std::string_view figure, double value) {
  for (std::size_t i = 0; i < kCalibrationFigures.size(); ++i) {
    if (kCalibrationFigures[i] != figure) continue;
    std::lock_guard<std::mutex> lock(mutex_);
    if (calibration_[i] == nullptr) {
      calibration_[i] =
          &calibration_family_->Add({{"series", series_}, {"figure", std::string(figure)}});
    }
    calibration_[i]->Set(value);
    return;
  }
}

ServiceMetrics::ServiceMetrics(ServiceMetricsOptions options)
    : options_(options), registry_(std::make_shared<prometheus::Registry>()) {
  prometheus::Registry& r = *registry_;
  accepted_ = &prometheus::BuildCounter()
                   .Name("plumbline_readings_accepted_total")
                   .Help("Readings that reached a series' model.")
                   .Register(r)
                   .Add({});
  late_ = &prometheus::BuildCounter()
               .Name("plumbline_readings_late_total")
               .Help("Readings refused because they were older than their series' lateness allows.")
               .Register(r)
               .Add({});
  rejected_family_ = &prometheus::BuildCounter()
                          .Name("plumbline_readings_rejected_total")
                          .Help("Lines and readings refused, by reason (late readings excluded).")
                          .Register(r);
  for (std::size_t i = 0; i < kReadingErrorCount; ++i) {
    rejected_by_parser_[i] = &rejected_family_->Add(
        {{"reason", std::string(ToString(static_cast<ReadingError>(i)))}});
  }
  auto engine_reason = [this](IngestOutcome outcome) {
    return &rejected_family_->Add({{"reason", std::string(ToString(outcome))}});
  };
  rejected_no_profile_ = engine_reason(IngestOutcome::kNoProfile);
  rejected_not_finite_ = engine_reason(IngestOutcome::kNotFinite);
  rejected_too_many_series_ = engine_reason(IngestOutcome::kTooManySeries);

  auto& alerts = prometheus::BuildCounter()
                     .Name("plumbline_alerts_total")
                     .Help("Alerts raised, by kind.")
                     .Register(r);
  for (AlertKind kind : kAlertKinds) {
    alerts_by_kind_[static_cast<std::size_t>(kind)] =
        &alerts.Add({{"kind", std::string(ToString(kind))}});
  }
  auto& events = prometheus::BuildCounter()
                     .Name("plumbline_events_total")
                     .Help("Events other than alerts (resume, retrain, meter_reset).")
                     .Register(r);
  for (EventType type : kOtherEvents) {
    events_by_type_[static_cast<std::size_t>(type)] =
        &events.Add({{"event", std::string(ToString(type))}});
  }

  auto& series = prometheus::BuildGauge()
                     .Name("plumbline_series")
                     .Help("Series held, by shard.")
                     .Register(r);
  auto& depth = prometheus::BuildGauge()
                    .Name("plumbline_shard_queue_depth")
                    .Help("Items waiting in each shard's input queue.")
                    .Register(r);
  auto& capacity = prometheus::BuildGauge()
                       .Name("plumbline_shard_queue_capacity")
                       .Help("Bound of each shard's input queue.")
                       .Register(r);
  for (std::size_t shard = 0; shard < options_.shards; ++shard) {
    const prometheus::Labels labels = {{"shard", std::to_string(shard)}};
    series_.push_back(&series.Add(labels));
    queue_depth_.push_back(&depth.Add(labels));
    queue_capacity_.push_back(&capacity.Add(labels));
  }
  latency_ = &prometheus::BuildHistogram()
                  .Name("plumbline_processing_latency_seconds")
                  .Help("Time from an input handing a batch to a shard until the shard has "
                        "processed it.")
                  .Register(r)
                  .Add({}, kLatencyBuckets);
  sink_failures_family_ = &prometheus::BuildCounter()
                               .Name("plumbline_sink_failures_total")
                               .Help("Failed alert deliveries or writes, by sink.")
                               .Register(r);

  detector_statistic_family_ =
      &prometheus::BuildGauge()
           .Name("plumbline_detector_statistic")
           .Help("Current detector statistic of a series (at most max_detector_series series).")
           .Register(r);
  detector_threshold_family_ =
      &prometheus::BuildGauge()
           .Name("plumbline_detector_threshold")
           .Help("Decision interval of a series' detector (at most max_detector_series series).")
           .Register(r);
  calibration_family_ =
      &prometheus::BuildGauge()
           .Name("plumbline_series_calibration")
           .Help("How a series' standardised residuals behave against the detectors' "
                 "assumptions: autocorrelation, variance, lag1, tail_share, drift_ratio "
                 "(at most max_detector_series series).")
           .Register(r);
  detector_series_ = &prometheus::BuildGauge()
                          .Name("plumbline_detector_series")
                          .Help("Series that have per-series detector gauges.")
                          .Register(r)
                          .Add({});
  detector_series_refused_ =
      &prometheus::BuildCounter()
           .Name("plumbline_detector_series_refused_total")
           .Help("Series refused per-series detector gauges by the cardinality guard.")
           .Register(r)
           .Add({});
  prometheus::BuildGauge()
      .Name("plumbline_detector_series_limit")
      .Help("The cardinality guard: most series with per-series detector gauges.")
      .Register(r)
      .Add({})
      .Set(static_cast<double>(options_.max_detector_series));

  http_requests_family_ = &prometheus::BuildCounter()
                               .Name("plumbline_http_requests_total")
                               .Help("HTTP API requests, by route and status code.")
                               .Register(r);
  http_connections_ = &prometheus::BuildGauge()
                           .Name("plumbline_http_connections")
                           .Help("Open HTTP connections.")
                           .Register(r)
                           .Add({});
  connections_dropped_family_ =
      &prometheus::BuildCounter()
           .Name("plumbline_connections_dropped_total")
           .Help("Connections closed or refused by the daemon, by input and reason.")
           .Register(r);
  ingest_memory_ = &prometheus::BuildGauge()
                        .Name("plumbline_ingest_memory_bytes")
                        .Help("Bytes of readings and HTTP bodies between the inputs and the "
                              "shards.")
                        .Register(r)
                        .Add({});
  ingest_memory_budget_ = &prometheus::BuildGauge()
                               .Name("plumbline_ingest_memory_budget_bytes")
                               .Help("Bound on plumbline_ingest_memory_bytes (ingest_memory).")
                               .Register(r)
                               .Add({});
  overloaded_family_ = &prometheus::BuildCounter()
                            .Name("plumbline_ingest_overloaded_total")
                            .Help("Times an input met a full ingest memory budget: TCP and "
                                  "file reads paused, HTTP answered 503.")
                            .Register(r);
  ready_ = &prometheus::BuildGauge()
                .Name("plumbline_ready")
                .Help("1 when the service is ready (GET /readyz answers 200), else 0.")
                .Register(r)
                .Add({});
  prometheus::BuildGauge()
      .Name("plumbline_build_info")
      .Help("Always 1; the version is a label.")
      .Register(r)
      .Add({{"version", PLUMBLINE_VERSION}})
      .Set(1.0);
}

ServiceMetrics::~ServiceMetrics() = default;

void ServiceMetrics::CountOutcome(IngestOutcome outcome, std::uint64_t n) {
  const double count = static_cast<double>(n);
  switch (outcome) {
    case IngestOutcome::kAccepted: accepted_->Increment(count); return;
    case IngestOutcome::kLate: late_->Increment(count); return;
    case IngestOutcome::kNoProfile: rejected_no_profile_->Increment(count); return;
    case IngestOutcome::kNotFinite: rejected_not_finite_->Increment(count); return;
    case IngestOutcome::kTooManySeries: rejected_too_many_series_->Increment(count); return;
  }
}

void ServiceMetrics::CountRejected(ReadingError reason, std::uint64_t n) {
  const auto index = static_cast<std::size_t>(reason);
  if (index < rejected_by_parser_.size()) {
    rejected_by_parser_[index]->Increment(static_cast<double>(n));
  }
}

prometheus::Counter* ServiceMetrics::RejectedCounter(std::string_view reason) {
  if (auto parsed = ReadingErrorFromString(reason)) {
    return rejected_by_parser_[static_cast<std::size_t>(*parsed)];
  }
  if (reason == ToString(IngestOutcome::kNoProfile)) return rejected_no_profile_;
  if (reason == ToString(IngestOutcome::kTooManySeries)) return rejected_too_many_series_;
  return &rejected_family_->Add({{"reason", std::string(reason)}});
}

void ServiceMetrics::CountRejected(std::string_view reason, std::uint64_t n) {
  if (reason == ToString(IngestOutcome::kLate)) {
    late_->Increment(static_cast<double>(n));
    return;
  }
  RejectedCounter(reason)->Increment(static_cast<double>(n));
}

void ServiceMetrics::CountEvent(const Alert& alert) {
  const std::size_t index = alert.event == EventType::kAlert
                                ? static_cast<std::size_t>(alert.kind)
                                : static_cast<std::size_t>(alert.event);
  auto& counters = alert.event == EventType::kAlert ? alerts_by_kind_ : events_by_type_;
  if (index < counters.size() && counters[index] != nullptr) counters[index]->Increment();
}

void ServiceMetrics::SetSeriesCount(std::size_t shard, std::size_t series) {
  if (auto* g = PerShard(series_, shard)) g->Set(static_cast<double>(series));
}

void ServiceMetrics::SetQueueDepth(std::size_t shard, std::size_t depth) {
  if (auto* g = PerShard(queue_depth_, shard)) g->Set(static_cast<double>(depth));
}

void ServiceMetrics::SetQueueCapacity(std::size_t shard, std::size_t capacity) {
  if (auto* g = PerShard(queue_capacity_, shard)) g->Set(static_cast<double>(capacity));
}

void ServiceMetrics::ObserveProcessingLatency(double seconds) { latency_->Observe(seconds); }

void ServiceMetrics::CountSinkFailure(std::string_view sink, std::uint64_t n) {
  sink_failures_family_->Add({{"sink", std::string(sink)}}).Increment(static_cast<double>(n));
}

SeriesGauges* ServiceMetrics::AdmitSeries(std::string_view series) {
  std::lock_guard<std::mutex> lock(series_mutex_);
  if (auto it = admitted_.find(series); it != admitted_.end()) return it->second.get();
  if (admitted_.size() >= options_.max_detector_series) {
    detector_series_refused_->Increment();
    return nullptr;
  }
  auto gauges = std::unique_ptr<SeriesGauges>(new SeriesGauges(
      std::string(series), detector_statistic_family_, detector_threshold_family_,
      calibration_family_));
  SeriesGauges* result = gauges.get();
  admitted_.emplace(std::string(series), std::move(gauges));
  detector_series_->Set(static_cast<double>(admitted_.size()));
  return result;
}

std::vector<std::pair<std::string, SeriesGauges*>> ServiceMetrics::AdmittedSeries() const {
  std::lock_guard<std::mutex> lock(series_mutex_);
  std::vector<std::pair<std::string, SeriesGauges*>> out;
  out.reserve(admitted_.size());
  for (const auto& [name, gauges] : admitted_) out.emplace_back(name, gauges.get());
  return out;
}

void ServiceMetrics::CountHttpRequest(std::string_view route, unsigned status) {
  http_requests_family_->Add({{"route", std::string(route)}, {"code", std::to_string(status)}})
      .Increment();
}

void ServiceMetrics::CountConnectionDropped(std::string_view input, std::string_view reason) {
  connections_dropped_family_
      ->Add({{"input", std::string(input)}, {"reason", std::string(reason)}})
      .Increment();
}

void ServiceMetrics::SetIngestMemory(std::size_t bytes) {
  ingest_memory_->Set(static_cast<double>(bytes));
}

void ServiceMetrics::SetIngestMemoryBudget(std::size_t bytes) {
  ingest_memory_budget_->Set(static_cast<double>(bytes));
}

void ServiceMetrics::CountOverloaded(std::string_view input) {
  overloaded_family_->Add({{"input", std::string(input)}}).Increment();
}

void ServiceMetrics::SetHttpConnections(std::size_t open) {
  http_connections_->Set(static_cast<double>(open));
}

void ServiceMetrics::SetReady(bool ready) { ready_->Set(ready ? 1.0 : 0.0); }

std::string ServiceMetrics::Serialize() const {
  return prometheus::TextSerializer().Serialize(registry_->Collect());
}

}  // namespace plumbline
