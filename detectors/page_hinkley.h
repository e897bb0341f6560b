// PageHinkley: the Page-Hinkley test for a shift of the mean, up and down at
// once, in its streaming form with a running mean and an optional forgetting
// factor. Not thread-safe: owned by one shard, like all per-series state.
//
// Mathematics
// -----------
// Input: readings x_1, x_2, ... (standardised, in control N(0, 1), but the
// running-mean form does not need the in-control mean to be known).
//
//   xbar_T = (1/T) * sum_{t=1..T} x_t        running mean, includes x_T
//            (or xbar_T = mu0, a fixed known mean, when use_running_mean = false)
//
//   up:    m_T = alpha * m_{T-1} + (x_T - xbar_T - delta),     m_0 = 0
//          M_T = min(m_0, m_1, ..., m_T)                       (m_0 = 0 included)
//          PH+_T = m_T - M_T,   alarm when PH+_T > lambda
//   down:  n_T = alpha * n_{T-1} + (xbar_T - x_T - delta),     n_0 = 0
//          N_T = min(n_0, n_1, ..., n_T)
//          PH-_T = n_T - N_T,   alarm when PH-_T > lambda
//
// The down side is the usual mirror (track max_t of sum (x_t - xbar_t + delta)
// and alarm when that maximum minus the current sum exceeds lambda) with the
// sign flipped: n_T is minus that sum. T counts readings since the last
// (re)start; after an alarm everything, the running mean included, restarts.
//
// PH_T is computed by the equivalent recursion
//   PH_T = max(0, PH_{T-1} + (m_T - m_{T-1})),  m_T - m_{T-1} = (alpha-1) m_{T-1} + inc_T
// (because M_T = min(M_{T-1}, m_T)), which avoids the cancellation between m_T
// and M_T when both drift like -delta * T over a long in-control stretch. With
// alpha = 1 and a known mean mu0 this is literally Page's one-sided CUSUM
//   g_T = max(0, g_{T-1} + x_T - mu0 - delta)
// with reference value delta and decision interval lambda.
//
// Two pitfalls this implementation avoids (REFERENCES.md section 4):
// - using the mean of all T readings inside every term makes
//   sum_{t<=T} (x_t - xbar_T) = 0, so m_T = -T * delta and the test never
//   fires; the running mean xbar_t of the first t readings is used instead;
// - taking the minimum over t >= 1 only breaks the identity with the CUSUM
//   above; m_0 = 0 is part of the minimum.
//
// Change-time estimate: the reading just after the last extremum of the
// cumulative sum, i.e. after the latest t with m_t = M_t (argmin, latest on
// ties) for an up alarm, and likewise for n_t for a down alarm (the argmax of
// the mirrored sum). If that extremum is the origin m_0, it is the first
// reading since the (re)start. Equivalently: the first reading of the current
// excursion of PH above zero, the same rule as the CUSUM's.
//
// Shift estimate, O(1) from running sums: with the alarm at reading T, change
// at reading tau, S_j = sum of x_1..x_j since the (re)start,
//   after  = (S_T - S_{tau-1}) / (T - tau + 1)          mean of x since change_at
//   before = S_{tau-1} / (tau - 1)   when use_running_mean and tau > 1
//          = mu                      (the `mean` option) otherwise
//   shift  = after - before
// (signed: positive for a rise). With a fixed known mean, `mean` is by
// definition the mean before the change; with a running mean and no reading
// before tau, the configured `mean` (0 for standardised input) stands in.
//
// Assumptions: independent readings; delta >= 0 is the drift tolerated without
// an alarm. The running mean makes the test self-starting (no in-control mean
// needed) but it also follows the new level after a change, so it detects
// late changes more slowly than a CUSUM with a known mean. The forgetting
// factor alpha < 1 shrinks old evidence, bounding how long a slow drift can
// accumulate; alpha = 1 is the classical test.
//
// Valid ranges: delta >= 0, lambda > 0, 0 < alpha <= 1, mean finite.
//
// Sources: Page, E. S. (1954), Biometrika 41:100-115. Hinkley, D. V. (1971),
// "Inference about the change-point from cumulative sum tests", Biometrika
// 58:509-523. Streaming form with a running mean and forgetting factor: Mouss
// et al. (2004), Proc. 5th Asian Control Conference; Gama et al. (2014), ACM
// Computing Surveys 46(4):44. No published ARL table exists for the running-mean
// form.
//
// Choosing parameters: delta plays the role of the CUSUM reference value k:
// about half the smallest shift worth catching (0.25 targets a 0.5-sigma
// shift). lambda sets the false-alarm rate. With a known mean and alpha = 1 the
// CUSUM tables apply exactly (one-sided per direction; two-sided
// 1/ARL = 1/ARL+ + 1/ARL-), e.g. delta = 0.5, lambda = 5 gives ARL0 about 465.
// With the running mean the run lengths differ and lambda should come from the
// calibration module (which records the target in `arl0`).
#pragma once

#include <cstdint>
#include <string>

#include "detectors/detection.h"
#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

struct PageHinkleyOptions {
  double delta = 0.25;           // tolerated drift per reading: finite, >= 0
  double lambda = 10.0;          // alarm threshold: finite, > 0
  double alpha = 1.0;            // forgetting factor: 0 < alpha <= 1 (1 = none)
  bool use_running_mean = true;  // false: use the fixed `mean` instead of xbar_t
  double mean = 0.0;             // known in-control mean: finite
  double arl0 = 0.0;  // in-control ARL lambda was calibrated for; 0 = not calibrated

  // True when every option is in range. Otherwise false, and *why (if not null)
  // names the first bad option and its valid range.
  bool IsValid(std::string* why) const;
};

class PageHinkley {
 public:
  // Checks the options; returns InvalidArgument naming the bad option otherwise.
  static StatusOr<PageHinkley> Create(const PageHinkleyOptions& options);

  // Precondition: options.IsValid(nullptr). Prefer Create for options that come
  // from users or config.
  explicit PageHinkley(const PageHinkleyOptions& options);

  // Adds one reading taken at `time`. Returns the alarm (fired only at the
  // reading where PH+ or PH- crosses lambda; if both cross at once, the larger
  // wins; the test then restarts). Alarm::statistic is max(PH+, PH-) after this
  // reading (before the restart). Fails with InvalidArgument, leaving all state
  // untouched, when x is NaN or infinite. Allocation-free on success.
  StatusOr<Alarm> Update(double x, EventTime time);

  // Back to the start state (as after construction).
  void Reset();
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

  double up_sum() const { return up_.sum; }                            // m_T
  double up_minimum() const { return up_.sum - up_.statistic; }        // M_T
  double up_statistic() const { return up_.statistic; }                // PH+_T
  double down_sum() const { return down_.sum; }                        // n_T
  double down_minimum() const { return down_.sum - down_.statistic; }  // N_T
  double down_statistic() const { return down_.statistic; }            // PH-_T
  // Time of the first reading of each side's current excursion (the change-time
  // estimate if that side fired now); meaningful only when the length is > 0.
  EventTime up_start() const { return up_.start; }
  EventTime down_start() const { return down_.start; }
  std::int64_t up_length() const { return up_.length; }
  std::int64_t down_length() const { return down_.length; }
  // xbar_T used at the latest reading (the fixed mean when not running; the
  // fixed mean too before the first reading).
  double reference_mean() const { return reference_mean_; }
  std::int64_t readings_since_restart() const { return readings_; }
  std::int64_t alarms() const { return alarms_; }  // alarms since construction or Reset

  const PageHinkleyOptions& options() const { return options_; }
  double arl0() const { return options_.arl0; }  // 0 = not calibrated

 private:
  struct Side {
    double sum = 0.0;               // m_T (or n_T)
    double statistic = 0.0;         // PH_T = m_T - M_T
    std::int64_t length = 0;        // readings since the last extremum
    EventTime start = 0;            // time of the reading after the last extremum
    double sum_x_before = 0.0;      // S_{tau-1}
    std::int64_t count_before = 0;  // tau - 1

    void Step(double increment, double alpha_minus_one, EventTime time,
              double sum_x_before_now, std::int64_t count_before_now) {
      const double change = alpha_minus_one * sum + increment;  // m_T - m_{T-1}
      sum += change;
      const double next = statistic + change;
      const bool positive = next > 0.0;
      const bool begins = positive && length == 0;
      statistic = positive ? next : 0.0;
      start = begins ? time : start;
      sum_x_before = begins ? sum_x_before_now : sum_x_before;
      count_before = begins ? count_before_now : count_before;
      length = positive ? length + 1 : 0;
    }
  };

  void Restart();
  double MeanSince(const Side& side) const;  // mean of x from the side's change_at on
  double ShiftEstimate(const Side& side) const;

  PageHinkleyOptions options_;
  double alpha_minus_one_ = 0.0;
  Side up_;
  Side down_;
  double sum_x_ = 0.0;  // S_T since the (re)start
  double reference_mean_ = 0.0;
  std::int64_t readings_ = 0;
  std::int64_t alarms_ = 0;
};

}  // namespace plumbline
