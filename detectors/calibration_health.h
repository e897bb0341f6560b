// CalibrationHealth: how the standardised residuals z that a series' level
// detectors see actually behave, against what their thresholds assume
// (independent N(0,1)). Where a count series expects few events, what they
// see, and so what this measures, is the reading's quantile residual
// (SeriesMonitor::Model). Not thread-safe; owned by one shard, inside the
// series' SeriesMonitor.
//
// Figures, each an exponentially weighted mean over about the last `memory`
// armed readings (weights (1 - 1/memory)^age, divided by their sum):
//
//   variance    E[w^2], w = z winsorised at +/- clip (what the detectors
//               see); 1 for N(0,1) less the clipping (0.9994 at clip 4)
//   lag1        E[w_t w_{t-1}] / E[w^2]; 0 for independent residuals
//   tail_share  share of readings with |z| > 3; 0.0027 for N(0,1)
//   drift_ratio variance x (1 + lag1) / (1 - lag1), lag1 capped at +/- 0.9:
//               the long-run variance of the sum of w per reading (AR(1)
//               approximation), which is what drives a CUSUM to its
//               threshold. A CUSUM's false-alarm rate grows steeply with it:
//               by the Brownian approximation (Siegmund 1985, ch. 2; MEM) a
//               threshold h designed at ratio 1 behaves like h / drift_ratio,
//               so 1.3 already shortens the in-control run length several
//               fold at arl0 in the thousands.
//
// Reading them: drift_ratio within [0.8, 1.25] and tail_share below 0.01
// mean the false-alarm promise holds about as designed; above, expect more
// false alarms than arl0 promises (the profile's `adapt_thresholds` re-fits
// the CUSUM on the observed residuals, series_monitor.h); below, fewer, and
// slower detection. The bands are our choice (common practice, no source).
//
// Memory is bounded: five doubles and a count.
#pragma once

#include <cstdint>

#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

class CalibrationHealth {
 public:
  static constexpr double kMemory = 2000.0;  // readings
  static constexpr double kClip = 4.0;       // the level detectors' winsorising

  void Add(double z);
  void Reset() { *this = CalibrationHealth(); }

  std::int64_t count() const { return count_; }  // readings added
  // NaN until the first reading (lag1, drift_ratio: the second).
  double variance() const;
  double lag1() const;
  double tail_share() const;
  double drift_ratio() const;

  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

 private:
  double weight_ = 0.0;       // sum of weights
  double lag_weight_ = 0.0;   // sum of weights of readings with a predecessor
  double square_ = 0.0;       // weighted sum of w^2
  double product_ = 0.0;      // weighted sum of w_t w_{t-1}
  double tail_ = 0.0;         // weighted count of |z| > 3
  double previous_ = 0.0;     // w_{t-1}
  std::int64_t count_ = 0;
};

}  // namespace plumbline
