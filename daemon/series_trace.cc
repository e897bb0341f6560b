#include "daemon/series_trace.h"

#include <algorithm>
#include <utility>

#include "detectors/time_format.h"

namespace plumbline {

TraceBefore TraceStateBefore(const SeriesMonitor* monitor) {
  if (monitor == nullptr) return {};
  const SeasonalForecaster* forecaster = monitor->forecaster();
  return {monitor->scale().sigma(), forecaster ? forecaster->updates() : 0};
}

TracePoint TracePointAfter(const SeriesMonitor* monitor, const TraceBefore& before,
                           EventTime time, double value) {
  TracePoint point;
  point.time = time;
  point.value = value;
  if (monitor == nullptr || before.updates == 0) return point;
  const ProfileOptions& profile = monitor->profile();
  const bool on_reading_scale = profile.kind != SeriesKind::kMeter && !profile.every;
  const SeasonalForecaster* forecaster = monitor->forecaster();
  if (!on_reading_scale || forecaster == nullptr) return point;
  const SeasonalForecaster::Begun begun = forecaster->last_begun();
  double forecast = 0.0, factor = 0.0;
  if (forecaster->updates() > before.updates && begun.from == time && begun.to == time) {
    forecast = begun.value;
    factor = begun.parameter_variance_factor;
  } else if (forecaster->last_time() < time) {
    const Forecast f = forecaster->Predict(time);
    forecast = f.value;
    factor = f.parameter_variance_factor;
  } else {
    return point;
  }
  point.forecast = static_cast<float>(forecast);
  point.band =
      static_cast<float>(kBandZ * before.sigma * std::sqrt(1.0 + std::max(0.0, factor)));
  return point;
}

void PointRing::Push(const TracePoint& point, std::size_t capacity) {
  if (capacity == 0) return;
  if (points_.size() < capacity) {
    points_.push_back(point);
    next_ = points_.size() % capacity;
    return;
  }
  points_[next_] = point;
  next_ = (next_ + 1) % points_.size();
}

std::vector<TracePoint> PointRing::Points() const {
  std::vector<TracePoint> out;
  out.reserve(points_.size());
  for (std::size_t i = 0; i < points_.size(); ++i) {
    out.push_back(points_[(next_ + i) % points_.size()]);
  }
  return out;
}

std::vector<TracePoint> Decimate(const std::vector<TracePoint>& points,
                                 std::size_t max_points) {
  if (points.size() <= max_points || max_points < 2) return points;
  const std::size_t runs = max_points / 2;
  std::vector<TracePoint> out;
  out.reserve(runs * 2);
  for (std::size_t r = 0; r < runs; ++r) {
    const std::size_t begin = points.size() * r / runs;
    const std::size_t end = points.size() * (r + 1) / runs;
    if (begin == end) continue;
    auto low = points.begin() + static_cast<std::ptrdiff_t>(begin);
    auto high = low;
    for (auto it = low; it != points.begin() + static_cast<std::ptrdiff_t>(end); ++it) {
      if (it->value < low->value) low = it;
      if (it->value > high->value) high = it;
    }
    if (low == high) {
      out.push_back(*low);
    } else if (low < high) {
      out.push_back(*low);
      out.push_back(*high);
    } else {
      out.push_back(*high);
      out.push_back(*low);
    }
  }
  return out;
}

ObservationTracer::ObservationTracer(std::string series, std::FILE* out)
    : series_(std::move(series)), out_(out) {}

void ObservationTracer::Observed(const SeriesMonitor& monitor, EventTime from,
                                 EventTime time, double value) {
  const std::vector<SeriesMonitor::DetectorSnapshot> detectors = monitor.DetectorSnapshots();
  if (!header_written_) {
    header_written_ = true;
    std::fprintf(out_, "time,value,observation,armed,sigma,z,phase_sigma");
    for (const auto& d : detectors) {
      std::fprintf(out_, ",%.*s,%.*s_threshold", static_cast<int>(d.name.size()),
                   d.name.data(), static_cast<int>(d.name.size()), d.name.data());
    }
    std::fprintf(out_, "\n");
  }
  std::fprintf(out_, "%s,%.10g,%lld,%d,%.6g,%.6g,%.6g", FormatRfc3339(time).c_str(), value,
               monitor.observations(), monitor.armed() ? 1 : 0, monitor.scale().sigma(),
               monitor.last_z(), monitor.PhaseSigmaOver(from, time));
  for (const auto& d : detectors) std::fprintf(out_, ",%.6g,%.6g", d.statistic, d.threshold);
  std::fprintf(out_, "\n");
}

}  // namespace plumbline
