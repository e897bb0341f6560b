// FakeServiceView: a ServiceView for tests of the HTTP API and for the API
// test server. It parses bodies with the real ReadingParser and keeps, per
// series, the count and the last reading; the model fields of GetSeries are
// made-up but deterministic functions of the readings. Tests control
// readiness, stored alerts, and can hold IngestLines at a gate (to stand in for
// backpressure) and ListSeries at another (a slow shard round trip). Counts readings in ServiceMetrics when given one.
// Thread-safe (one mutex).
#pragma once

#include <algorithm>
#include <atomic>
#include <condition_variable>
#include <deque>
#include <map>
#include <mutex>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/metrics.h"
#include "daemon/reading_parser.h"
#include "daemon/service_view.h"
#include "detectors/glob.h"

namespace plumbline::testing {

class FakeServiceView : public ServiceView {
 public:
  explicit FakeServiceView(ServiceMetrics* metrics = nullptr) : metrics_(metrics) {}

  IngestReceipt IngestLines(std::string_view body) override {
    {
      std::unique_lock<std::mutex> lock(mutex_);
      ++waiting_;
      changed_.notify_all();
      changed_.wait(lock, [this] { return !gate_closed_; });
      --waiting_;
    }
    IngestReceipt receipt;
    if (overloaded_) {
      receipt.overloaded = true;  // as the service answers at a full ingest budget
      return receipt;
    }
    std::vector<std::pair<std::string, Reading>> readings;
    ReadingParser parser(
        ReadingParserOptions{},
        [&](const Reading& r) { readings.push_back({std::string(r.series), r}); },
        [&](std::uint64_t line, ReadingError reason, std::string_view) {
          ++receipt.rejected;
          if (receipt.first_rejections.size() < IngestReceipt::kMaxReportedRejections) {
            receipt.first_rejections.push_back({line, std::string(ToString(reason))});
          }
          if (metrics_) metrics_->CountRejected(reason);
        });
    parser.Feed(body);
    parser.Finish();
    std::lock_guard<std::mutex> lock(mutex_);
    for (auto& [name, reading] : readings) {
      auto [it, inserted] = series_.try_emplace(name);
      Series& s = it->second;
      if (inserted && metrics_) metrics_->AdmitSeries(name);  // as the service does
      s.summary.name = name;
      s.summary.kind = "gauge";
      s.summary.last_time = reading.time;
      s.summary.last_value = reading.value;
      ++s.summary.readings;
      s.summary.armed = s.summary.readings >= 3;
      s.points.push_back({reading.time, reading.value, reading.value - 0.5});
      if (s.points.size() > 5) s.points.pop_front();
      ++receipt.accepted;
      ++total_accepted_;
    }
    if (metrics_) {
      metrics_->CountOutcome(IngestOutcome::kAccepted, readings.size());
      metrics_->SetSeriesCount(0, series_.size());
    }
    return receipt;
  }

  std::vector<SeriesSummary> ListSeries(std::string_view glob) override {
    std::unique_lock<std::mutex> lock(mutex_);
    ++query_waiting_;
    changed_.notify_all();
    changed_.wait(lock, [this] { return !query_gate_closed_; });
    --query_waiting_;
    std::vector<SeriesSummary> rows;
    for (const auto& [name, s] : series_) {  // std::map: sorted by name
      if (glob.empty() || glob == "**" || GlobMatch(glob, name)) rows.push_back(s.summary);
    }
    return rows;
  }

  std::optional<SeriesDetail> GetSeries(std::string_view name) override {
    std::lock_guard<std::mutex> lock(mutex_);
    auto it = series_.find(std::string(name));
    if (it == series_.end()) return std::nullopt;
    const Series& s = it->second;
    SeriesDetail d;
    d.summary = s.summary;
    d.forecast = s.summary.last_value - 0.5;
    d.sigma = 0.25;
    d.band_low = d.forecast - 2 * d.sigma;
    d.band_high = d.forecast + 2 * d.sigma;
    d.last_z = 2.0;
    d.calibration.autocorrelation = 0.125;
    d.calibration.variance = 1.5;
    d.calibration.lag1 = 0.25;
    d.calibration.tail_share = 0.0625;
    d.calibration.drift_ratio = 2.5;
    d.calibration.level_chart = "count";
    d.detectors = {{"cusum", 1.5, 5.0}, {"page-hinkley", 0.5, 7.0}};
    d.run_length = SeriesDetail::RunLength{static_cast<double>(s.summary.readings), 0.01};
    d.recent_points.assign(s.points.begin(), s.points.end());
    for (const Alert& a : alerts_) {
      if (a.series == name) d.recent_alerts.push_back(a);
    }
    return d;
  }

  std::vector<Alert> AlertsSince(EventTime since) override {
    std::lock_guard<std::mutex> lock(mutex_);
    std::vector<Alert> out;
    for (const Alert& a : alerts_) {
      if (a.detected_at >= since) out.push_back(a);
    }
    return out;
  }

  bool Ready(std::string* why) override {
    std::lock_guard<std::mutex> lock(mutex_);
    if (!ready_ && why) *why = not_ready_reason_;
    return ready_;
  }

  // ---- test controls ----
  void SetReady(bool ready, std::string reason = "") {
    std::lock_guard<std::mutex> lock(mutex_);
    ready_ = ready;
    not_ready_reason_ = std::move(reason);
  }
  void AddAlert(Alert alert) {
    std::lock_guard<std::mutex> lock(mutex_);
    if (metrics_) metrics_->CountEvent(alert);
    alerts_.push_back(std::move(alert));
  }
  // While closed, IngestLines waits (as under backpressure).
  void CloseGate() {
    std::lock_guard<std::mutex> lock(mutex_);
    gate_closed_ = true;
  }
  void OpenGate() {
    std::lock_guard<std::mutex> lock(mutex_);
    gate_closed_ = false;
    changed_.notify_all();
  }
  // Blocks until `n` IngestLines calls wait at the gate.
  void AwaitWaiting(int n) {
    std::unique_lock<std::mutex> lock(mutex_);
    changed_.wait(lock, [&] { return waiting_ >= n; });
  }
  // The same for ListSeries (a query that holds a query thread).
  void CloseQueryGate() {
    std::lock_guard<std::mutex> lock(mutex_);
    query_gate_closed_ = true;
  }
  void OpenQueryGate() {
    std::lock_guard<std::mutex> lock(mutex_);
    query_gate_closed_ = false;
    changed_.notify_all();
  }
  void AwaitQueryWaiting(int n) {
    std::unique_lock<std::mutex> lock(mutex_);
    changed_.wait(lock, [&] { return query_waiting_ >= n; });
  }
  std::size_t total_accepted() {
    std::lock_guard<std::mutex> lock(mutex_);
    return total_accepted_;
  }

 public:
  // From now on IngestLines takes nothing and says the budget is full.
  void SetOverloaded(bool overloaded) { overloaded_ = overloaded; }

 private:
  struct Series {
    SeriesSummary summary;
    std::deque<SeriesDetail::Point> points;
  };
  ServiceMetrics* const metrics_;
  std::mutex mutex_;  // guards everything below
  std::condition_variable changed_;
  std::map<std::string, Series, std::less<>> series_;
  std::vector<Alert> alerts_;
  bool ready_ = true;
  std::string not_ready_reason_;
  bool gate_closed_ = false;
  std::atomic<bool> overloaded_{false};
  int waiting_ = 0;
  bool query_gate_closed_ = false;
  int query_waiting_ = 0;
  std::size_t total_accepted_ = 0;
};

}  // namespace plumbline::testing
