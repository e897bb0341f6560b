// Series traces: what the status page and the replay report draw for a
// series. A TracePoint is one accepted reading with the forecast the model
// made for it just before it arrived (one step ahead) and the half-width of
// the band around that forecast (about 95%: 1.96 residual sd, widened by the
// forecaster's parameter uncertainty). PointRing keeps the last N of them.
//
// Only gauges and counts read without `every` get a forecast: for them the
// model forecasts the reading itself. A meter's model forecasts a rate, and a
// bucketed series a bucket, neither of which is on the reading's scale, so
// their points carry the reading alone.
//
// Pure computation; not thread-safe (a ring belongs to the shard that owns
// its series).
#pragma once

#include <cmath>
#include <cstddef>
#include <cstdio>
#include <limits>
#include <string>
#include <vector>

#include "detectors/event_time.h"
#include "detectors/series_monitor.h"

namespace plumbline {

// Two-sided 95% normal quantile, for the forecast band.
inline constexpr double kBandZ = 1.959963984540054;

struct TracePoint {
  EventTime time = 0;
  double value = 0.0;
  // Single precision: a forecast is only good to a fraction of its sd, and a
  // point stays at 24 bytes. NaN: no forecast (learning, or not on the
  // reading's scale).
  float forecast = std::numeric_limits<float>::quiet_NaN();
  float band = std::numeric_limits<float>::quiet_NaN();  // half-width, >= 0

  bool has_forecast() const { return std::isfinite(forecast); }
};

// A series as it stood before a reading was fed to it, for TracePointAfter.
struct TraceBefore {
  double sigma = 0.0;     // residual scale, for the band
  long long updates = 0;  // its forecaster's updates (0: no monitor or no data yet)
};
TraceBefore TraceStateBefore(const SeriesMonitor* monitor);

// The point for a reading (time, value) just fed to `monitor` (null: no
// series), with the forecast the model made for it before it was folded in:
// the one the model's last update began with, when that update was this
// reading; else, while the reading is held back for reordering (the model has
// not reached its time), one made now. None when the model had no data before
// the reading, or has folded in others since. The update's own forecast knows
// what happened at the reading's time (a planned change reopening the model
// widens its band), and while rival forecasters compete in warmup it is the
// one now leading. Taking it saves a second forecast per reading: serve's
// per-reading work, 15.2 k -> 10.2 k instructions (callgrind, 200 series).
TracePoint TracePointAfter(const SeriesMonitor* monitor, const TraceBefore& before,
                           EventTime time, double value);

// The last `capacity` points of a series, oldest dropped. Capacity 0 keeps
// nothing. Memory: capacity x sizeof(TracePoint) once full.
class PointRing {
 public:
  void Push(const TracePoint& point, std::size_t capacity);
  // Oldest first.
  std::vector<TracePoint> Points() const;
  std::size_t size() const { return points_.size(); }

 private:
  std::vector<TracePoint> points_;
  std::size_t next_ = 0;  // where the next point goes once full (= the oldest)
};

// At most about `max_points` points that still show the shape of `points`
// (time-ordered): the points are cut into max_points / 2 runs of equal count
// and each run keeps its lowest and highest reading, in time order, so spikes
// survive. Fewer points than max_points are returned as they are.
std::vector<TracePoint> Decimate(const std::vector<TracePoint>& points,
                                 std::size_t max_points);

// replay --trace: one series' standardised residual and every detector's
// statistic and threshold at each of its observations, as CSV, to answer
// "why did it fire, and why not sooner". One line per observation, told by
// the monitor (ObservationListener): for a series read without `every` that is
// each reading; for a bucketed series each bucket (its end time and its total
// or mean, as the detectors saw it, so an alert's detected_at has its line);
// for a meter each consumption rate. Before the model is armed, z is 0 and the
// detectors are idle. phase_sigma is the residual spread the profile expects
// at the observation's phase (z's divisor; the profile as it stands after the
// observation, which moved it by at most one reading's share).
class ObservationTracer : public ObservationListener {
 public:
  // Writes to `out` (not owned; the caller closes it).
  ObservationTracer(std::string series, std::FILE* out);
  const std::string& series() const { return series_; }
  void Observed(const SeriesMonitor& monitor, EventTime from, EventTime to,
                double value) override;

 private:
  std::string series_;
  std::FILE* out_;
  bool header_written_ = false;
};

}  // namespace plumbline
