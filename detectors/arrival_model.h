// ArrivalModel: when does the next reading come? Models the gaps between a
// series' readings and detects a lasting change in how often they arrive.
// Not thread-safe; owned by one shard.
//
// Baseline: theta = mean inter-arrival time, learned as a running mean over the
// first `warmup` gaps, then an exponentially weighted mean over `window` gaps
// that is frozen while either CUSUM below is away from zero (so the baseline does
// not chase the change it is testing for).
//
// Detection: time-between-events CUSUMs on X_t = gap_t / theta (exponential with
// mean 1 for a Poisson stream in control):
//
//   slower (rate falls, theta -> 2 theta):  S+ = max(0, S+ + X - 2 ln 2)
//   faster (rate rises, theta -> theta/2):  S- = max(0, S- + ln 2 - X)
//
// Both reference values are the log-likelihood-ratio values for an exponential
// mean moving by a factor of 2 (Lucas 1985, Technometrics 27:129-144; Vardeman &
// Ray 1985, Technometrics 27:145-150; MEM). Decision intervals h+ and h- come
// from the exact Markov chain for exponential increments (run_length_chain.h,
// checked against REFERENCES.md 7.2), each side at twice the rate budget's ARL0.
// Readings that arrive more regularly than a Poisson stream (a sensor every
// minute) make X nearly constant, so the scheme is conservative for them; bursty
// streams (gaps more variable than exponential) false-alarm more often than the
// design says.
//
// Change time: the arrival that started the fired side's excursion (the reading
// after its last zero). Also gives quantiles of the next arrival time under the
// exponential model: t_last + theta * (-ln(1 - q)).
#pragma once

#include <string>

#include "detectors/detection.h"
#include "detectors/event_time.h"
#include "detectors/status.h"

namespace plumbline {

struct ArrivalModelOptions {
  int warmup = 20;         // gaps before the CUSUMs arm, [3, 1e6]
  int window = 1000;       // gaps in the baseline's running mean, [10, 1e7]
  double slower_h = 10.0;  // decision interval of the slower-arrivals side, > 0
  double faster_h = 10.0;  // decision interval of the faster-arrivals side, > 0

  bool IsValid(std::string* why) const;
  // Decision intervals for a target ARL0 (in gaps) for the pair of sides.
  static StatusOr<ArrivalModelOptions> Calibrated(double arl0);
};

class ArrivalModel {
 public:
  explicit ArrivalModel(const ArrivalModelOptions& options);

  // Records a reading arriving at time t (>= the previous). The alarm fires with
  // direction kDown when readings became rarer, kUp when they came faster.
  Alarm Observe(EventTime t);

  bool armed() const { return gaps_ > options_.warmup; }
  // Mean gap in microseconds; 0 before two readings.
  double mean_gap() const { return theta_; }
  EventTime last_arrival() const { return last_; }
  long long arrivals() const { return arrivals_; }
  // Time by which the next reading comes with probability q in (0, 1).
  EventTime NextArrivalQuantile(double q) const;
  double slower_statistic() const { return slower_; }
  double faster_statistic() const { return faster_; }
  // Restarts the CUSUMs and re-learns the baseline from the next gaps.
  void Rebaseline();

 private:
  ArrivalModelOptions options_;
  double theta_ = 0.0;
  long long gaps_ = 0;       // gaps seen since the last (re)baseline
  long long arrivals_ = 0;
  EventTime last_ = 0;
  double slower_ = 0.0, faster_ = 0.0;
  EventTime slower_start_ = 0, faster_start_ = 0;
};

}  // namespace plumbline
