// Cusum: the two-sided tabular CUSUM for a shift in the mean of standardised
// readings, and OneSidedCusum, the same recursion on one side for any stream of
// increments (inter-arrival times, squared residuals). Not thread-safe: owned by
// one shard, like all per-series state.
//
// Mathematics
// -----------
// Input: z_t, standardised so that in control z_t ~ N(0, 1) i.i.d.
//
//   C+_t = max(0, C+_{t-1} + z_t - k)        upper side, detects an increase
//   C-_t = max(0, C-_{t-1} - z_t - k)        lower side, detects a decrease
//   C+_0 = C-_0 = s                          s = headstart, usually 0
//   signal at t when C+_t > h or C-_t > h    (strict inequality)
//
// k (the reference value) and h (the decision interval) are in standard
// deviations of z. Both sides cannot signal at the same reading: that would need
// C+_{t-1} + C-_{t-1} > 2h + 2k, while neither exceeds h before a signal.
//
// Fast initial response (Lucas and Crosier 1982): start both sides at a
// headstart 0 <= s < h (usually s = h/2) so that a process that is already out
// of control when the chart starts, or restarts, is caught sooner. After every
// signal the chart restarts by itself: both sides return to s.
//
// Change-time and shift estimates (Montgomery ch. 9). An excursion of one side
// is the run of readings since the last reading at which that side was zero; if
// the side has not been zero since the (re)start, the excursion is every
// reading since the (re)start. When side "+" signals after an excursion of N
// readings that began at reading tau:
//   change_at = time of reading tau
//   shift     = +(k + (C+_t - C0) / N)
// where C0 is the value the side started the excursion from: 0 after a zero, s
// when the excursion runs from the (re)start. (C+_t - C0)/N + k is exactly the
// mean of z over the excursion. With C0 = 0 this is Montgomery's estimate
// k + C+/N; subtracting the headstart keeps it unbiased by the headstart. The
// lower side mirrors it with the sign of the shift negated.
//
// Assumptions: independent readings with a known in-control mean and
// variance (here 0 and 1 after standardisation). Autocorrelated residuals
// shorten the in-control run length; the forecaster is responsible for
// whitening.
//
// Valid ranges: k > 0, h > 0, 0 <= s < h, all finite.
//
// Sources: Page, E. S. (1954), "Continuous inspection schemes", Biometrika
// 41:100-115. Montgomery, D. C., Introduction to Statistical Quality Control,
// ch. 9 (tabular CUSUM, ARL table for k = 1/2, h = 4 and 5, shift estimate).
// Lucas, J. M. and Crosier, R. B. (1982), "Fast initial response for CUSUM
// quality-control schemes", Technometrics 24:199-205.
//
// Choosing parameters: set k to half the smallest shift worth catching (in
// standard deviations): k = 0.5 is tuned to a 1-sigma shift. Then choose h for
// the in-control average run length (ARL0) you can live with: with k = 0.5,
// h = 4 gives a two-sided ARL0 of about 168 and h = 5 about 465; h = 5.071
// gives 500 (see REFERENCES.md section 1). The calibration module computes h for
// any ARL0 and records it in `arl0`. A headstart of h/2 speeds detection of a
// change present at start-up at a modest cost in ARL0 (465 -> 430 at h = 5).
//
// OneSidedCusum runs S_t = max(0, S_{t-1} + x_t - k), signal when S_t > h, on
// any finite increments x_t, with the same headstart, restart, change_at and
// excursion-mean rules. It reports direction kUp and, in `shift`, the mean of x
// over the excursion (k + (S_t - S0)/N); that is the size of the shift only
// when the in-control mean of x is 0. To watch for a decrease, feed -x with the
// matching reference value and read the direction as down. Here k may be any
// finite number (for exponential inter-arrival times it is a positive mean).
#pragma once

#include <cmath>
#include <cstdint>
#include <string>

#include "detectors/detection.h"
#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

struct CusumOptions {
  double k = 0.5;          // reference value, in standard deviations: k > 0
  double h = 5.0;          // decision interval, in standard deviations: h > 0
  double headstart = 0.0;  // fast-initial-response start value: 0 <= headstart < h
  double arl0 = 0.0;       // in-control ARL h was calibrated for; 0 = not calibrated

  // True when every option is in range. Otherwise false, and *why (if not null)
  // names the first bad option and its valid range.
  bool IsValid(std::string* why) const;
};

struct OneSidedCusumOptions {
  double k = 0.5;          // reference value subtracted from each increment: finite
  double h = 5.0;          // decision interval: h > 0
  double headstart = 0.0;  // start and restart value: 0 <= headstart < h
  double arl0 = 0.0;       // in-control ARL h was calibrated for; 0 = not calibrated

  bool IsValid(std::string* why) const;
};

namespace cusum_internal {

// One side of a CUSUM: S = max(0, S + increment), with the bookkeeping for the
// change-time and shift estimates. Plain data so the owning detectors can keep
// it inline and branch-free.
struct Side {
  double value = 0.0;       // S_t
  double origin = 0.0;      // value the current excursion started from (0 or headstart)
  std::int64_t length = 0;  // readings in the current excursion (0 = none yet)
  EventTime start = 0;      // time of the first reading of the current excursion

  void Restart(double headstart) {
    value = headstart;
    origin = headstart;
    length = 0;
    start = 0;
  }

  // `increment` is x - k (upper) or -x - k (lower).
  void Step(double increment, EventTime time) {
    const double next = value + increment;
    const bool positive = next > 0.0;
    value = positive ? next : 0.0;
    origin = positive ? origin : 0.0;
    start = (positive && length == 0) ? time : start;
    length = positive ? length + 1 : 0;
  }
};

}  // namespace cusum_internal

class Cusum {
 public:
  // Checks the options; returns InvalidArgument naming the bad option otherwise.
  static StatusOr<Cusum> Create(const CusumOptions& options);

  // Precondition: options.IsValid(nullptr). Prefer Create for options that come
  // from users or config.
  explicit Cusum(const CusumOptions& options);

  // Adds one standardised reading taken at `time`. Returns the alarm (fired
  // only at the reading where a side crosses h; the chart then restarts at the
  // headstart). Alarm::statistic is max(C+, C-) after this reading (before the
  // restart). Fails with InvalidArgument, leaving all state untouched, when x is
  // NaN or infinite. Allocation-free on success.
  StatusOr<Alarm> Update(double x, EventTime time);

  // Back to the start state: both sides at the headstart, counters cleared.
  void Reset();
  // A new decision interval (an empirical re-fit), state kept; ignored unless
  // finite and above the headstart. Save does not carry it: the owner does.
  void SetDecisionInterval(double h) {
    if (std::isfinite(h) && h > options_.headstart) options_.h = h;
  }
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

  double upper() const { return upper_.value; }  // C+
  double lower() const { return lower_.value; }  // C-
  // Readings in the current excursion of each side (0 when it is at zero, or
  // has seen no reading since the restart).
  std::int64_t upper_length() const { return upper_.length; }
  std::int64_t lower_length() const { return lower_.length; }
  // Time of the first reading of each side's current excursion; meaningful
  // only when the matching length is > 0.
  EventTime upper_start() const { return upper_.start; }
  EventTime lower_start() const { return lower_.start; }
  std::int64_t readings_since_restart() const { return readings_; }
  std::int64_t alarms() const { return alarms_; }  // signals since construction or Reset

  const CusumOptions& options() const { return options_; }
  double arl0() const { return options_.arl0; }  // 0 = not calibrated

 private:
  void Restart();

  CusumOptions options_;
  cusum_internal::Side upper_;
  cusum_internal::Side lower_;
  std::int64_t readings_ = 0;
  std::int64_t alarms_ = 0;
};

class OneSidedCusum {
 public:
  static StatusOr<OneSidedCusum> Create(const OneSidedCusumOptions& options);

  // Precondition: options.IsValid(nullptr).
  explicit OneSidedCusum(const OneSidedCusumOptions& options);

  // Adds one increment x. Same contract as Cusum::Update; a fired alarm has
  // direction kUp and shift = mean of x over the excursion.
  StatusOr<Alarm> Update(double x, EventTime time);

  void Reset();

  double value() const { return side_.value; }  // S_t
  std::int64_t length() const { return side_.length; }
  EventTime start() const { return side_.start; }
  std::int64_t readings_since_restart() const { return readings_; }
  std::int64_t alarms() const { return alarms_; }

  const OneSidedCusumOptions& options() const { return options_; }
  double arl0() const { return options_.arl0; }

 private:
  OneSidedCusumOptions options_;
  cusum_internal::Side side_;
  std::int64_t readings_ = 0;
  std::int64_t alarms_ = 0;
};

}  // namespace plumbline
