// ArrivalModel: when does the next reading come? Models the gaps between a
// series' readings and detects a lasting change in how often they arrive.
// Not thread-safe; owned by one shard.
//
// Baseline: theta = mean inter-arrival time, learned as a running mean of the
// gaps since the last (re)baseline, which becomes an exponentially weighted mean
// over `window` gaps once it has that many. Each gap joins theta after it has
// been tested, capped at gap_cap * theta so a silence cannot drag the baseline.
//
// Detection: time-between-events CUSUMs on the self-starting score
//
//   X_t = n ln(1 + r_t / n),   r_t = gap_t / theta,  n = min(gaps in theta, window)
//
// For a Poisson stream, gap_t / (sum of n earlier gaps) is beta-prime(1, n), so
// P(r_t > r) = (1 + r/n)^-n and X_t is exactly Exp(1) in control however few
// gaps theta rests on, and successive X_t are independent (exactly while theta
// is a plain mean, nearly so once it is exponentially weighted; the self-starting
// idea of Hawkins 1987, "Self-starting CUSUM charts for location and scale",
// The Statistician 36:299-315, here for the exponential scale; MEM); for large n,
// X_t -> r_t. Then
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
// One long gap is a silence, not a rate change, so X is capped at gap_cap (6 mean
// gaps; an exponential gap exceeds it with probability e^-6 = 0.25%) and the
// chain is calibrated for the capped increment (common practice, no source).
//
// Why the baseline is not frozen during an excursion: with theta from only the
// warmup's 20 gaps (22% standard error) a frozen baseline kept its error for tens
// of thousands of gaps, and the in-control ARL came out at half the design (234
// for a design of 500, 76% false alarms within 2000 gaps at a design of 5000,
// against 33% expected). Folding every gap costs little power: a rate change
// moves theta by (new - old) / window per gap, 1-2% over 20 gaps at window 1000
// (measured in tests/detectors/arrival_model_test.cc).
//
// Seasonal arrivals (time rescaling): many streams arrive faster by day than
// by night, or on weekdays. With a `season`, gaps are measured in operational
// time, tau(t) = integral of p(phase(s)) ds, where p is the arrival intensity at
// each phase of the season relative to its mean (so p averages 1 and an
// operational gap is a gap "as if the stream were even"). By the time-rescaling
// theorem a Poisson stream with intensity lambda p(phase) becomes a homogeneous
// one in operational time (Brown, Barbieri, Ventura, Kass & Frank 2002, "The
// time-rescaling theorem and its application to neural spike train data
// analysis", Neural Computation 14:325-346; MEM), so everything above applies
// to operational gaps unchanged. p is estimated per phase bin from events and
// exposure, forgotten over `shape_memory`, and shrunk toward the mean rate by
// kShapePrior events per bin (partial pooling, common practice, no source):
//
//   p_b = (e_b + k) / (x_b + k / rbar), then divided by its mean over the bins
//
// (e_b events and x_b exposure in bin b, rbar the mean rate, k = kShapePrior).
//
// Two-level pooling (with a shorter season that divides this one, such as a day
// in a week): a weekly bin is shrunk toward its hour of the day instead, itself
// pooled over the days and shrunk toward the mean rate as above,
//
//   r_j = (E_j + k) / (X_j + k / rbar)          (E_j, X_j: sums over the bins at phase j
//   of the day) p_b = (e_b + k r_j / rbar) / (x_b + k / rbar)
//
// so a quiet night hour is learned from every night seen, not only from the same
// night of the week (a hierarchical, empirical-Bayes prior; common practice, no
// source). Without it a weekly shape needs weeks before its quiet hours stop
// looking like a slowdown.
//
// It is used once it has seen one whole season (before that p = 1).
//
// Change time: the arrival that started the fired side's excursion (the reading
// after its last zero). Also gives quantiles of the next arrival time under the
// exponential model: t_last + theta * (-ln(1 - q)).
#pragma once

#include <limits>
#include <numbers>
#include <optional>
#include <string>
#include <vector>

#include "detectors/detection.h"
#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

struct ArrivalModelOptions {
  int warmup = 20;             // gaps before the CUSUMs arm, [3, 1e6]
  int window = 1000;           // gaps in the baseline's running mean, [10, 1e7]
  double slower_h = 10.0;      // decision interval of the slower-arrivals side, > 0
  double faster_h = 10.0;      // decision interval of the faster-arrivals side, > 0
  double gap_cap = 6.0;        // X is capped here, so one long gap (a silence) alone
                               // cannot fire the slower side; > 2 ln 2
  EventTime season = 0;        // period of the arrival intensity's shape; 0 = even
  int season_bins = 1;         // phase bins of the shape, [1, 1000]
  EventTime shape_memory = 0;  // forgetting time of the shape; 0 = 4 seasons
  int season_fold_bins =
      0;  // bins of a shorter season that divides `season` (the
          // two-level pooling above); 0 = none; must divide season_bins

  // Reference values of the two sides (see above): theta -> 2 theta, theta -> theta / 2.
  static constexpr double kSlowerReference = 2.0 * std::numbers::ln2;
  static constexpr double kFasterReference = std::numbers::ln2;

  bool IsValid(std::string* why) const;
  // Decision intervals for a target ARL0 (in gaps) for the pair of sides.
  static StatusOr<ArrivalModelOptions> Calibrated(double arl0);
};

// The relative arrival intensity p(phase) of one season, and operational time.
// Not thread-safe; owned by its ArrivalModel.
class ArrivalShape {
 public:
  static constexpr double kShapePrior = 2.0;  // pseudo-events per bin at the mean rate

  // fold_bins: 0, or the bins of a shorter season dividing the period (must
  // divide `bins`), toward whose phases the bins are pooled.
  ArrivalShape(EventTime period, int bins, EventTime memory, int fold_bins = 0);
  // Records the stretch [from, to] in which the stream was watched, ending with
  // an arrival at `to`.
  void Record(EventTime from, EventTime to);
  // Operational time between from and to (equal to to - from while unlearned).
  double Operational(EventTime from, EventTime to) const;
  // The wall time at which `operational` microseconds of operational time have
  // passed since `from` (searches at most kMaxPeriods seasons ahead).
  EventTime WallTimeAfter(EventTime from, double operational) const;
  bool learned() const { return exposure_total_ >= static_cast<double>(period_); }
  double relative_intensity(int bin) const { return learned() ? p_[bin] : 1.0; }
  // Starts loading the bins an arrival at `t` touches into the caches.
  void Prefetch(EventTime t) const;
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

 private:
  static constexpr int kMaxPeriods = 8;
  int Bin(EventTime t) const;
  // The end of phase bin `bin`, which holds t.
  EventTime BinEnd(EventTime t, int bin) const;
  void AddExposure(EventTime from, EventTime to, double weight);
  void Refresh();
  void Rescale(double factor);  // divides the tables by factor

  EventTime period_;
  EventTime width_;  // bin width
  double memory_;    // microseconds
  int fold_bins_;    // 0 = one-level pooling
  // Forgetting-weighted event counts and exposures (microseconds) per bin, in
  // single precision: weights are rescaled at kMaxWeight, so a bin's exposure
  // stays below kMaxWeight times the memory, far inside a float's range, and
  // only their ratios are used, which a float's 7 digits carry well past
  // what a few events a bin can estimate.
  static constexpr double kMaxWeight = 1e15;
  std::vector<float> events_, exposure_;
  // Relative intensities, derived from the two above at each refresh; single
  // precision is ample for a ratio estimated from a few events a bin.
  std::vector<float> p_;
  double exposure_total_ = 0.0;             // unforgotten, for `learned`
  EventTime anchor_ = 0;                    // weights grow as exp((t - anchor) / memory)
  double weight_ = 1.0;                     // weight of the latest contribution
  static constexpr int kRefreshEvery = 32;  // arrivals between re-derivations of p
  int records_since_refresh_ = 0;
  bool refreshed_once_ = false;  // derived at least once since being learned
  bool anchored_ = false;
};

class ArrivalModel {
 public:
  explicit ArrivalModel(const ArrivalModelOptions& options);

  // Records a reading arriving at time t (>= the previous). The alarm fires with
  // direction kDown when readings became rarer, kUp when they came faster.
  Alarm Observe(EventTime t);
  // Starts loading the state an arrival at `t` touches into the caches.
  void Prefetch(EventTime t) const;

  // Armed once warm and, with a season, once its shape has been seen whole.
  bool armed() const { return gaps_ > options_.warmup && (!shape_ || shape_->learned()); }
  // Mean gap in microseconds (in operational time with a season); 0 before
  // two readings.
  double mean_gap() const { return theta_; }
  EventTime last_arrival() const { return last_; }
  long long arrivals() const { return arrivals_; }
  // Time by which the next reading comes with probability q in (0, 1), under
  // the (seasonal) exponential model.
  EventTime NextArrivalQuantile(double q) const;
  // The time at which `mean_gaps` mean gaps of operational time have passed
  // since `from` (with a season, slow hours count for less).
  EventTime TimeAfterMeanGaps(EventTime from, double mean_gaps) const;
  // Replaces the decision intervals (after an empirical re-fit); both > 0.
  void SetDecisionIntervals(double slower_h, double faster_h);
  const ArrivalModelOptions& options() const { return options_; }
  // The score X of the latest gap while armed (NaN otherwise).
  double last_score() const { return last_score_; }
  double slower_statistic() const { return slower_; }
  double faster_statistic() const { return faster_; }
  // Restarts the CUSUMs and re-learns the baseline from the next gaps.
  void Rebaseline();
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

 private:
  ArrivalModelOptions options_;
  double theta_ = 0.0;
  long long gaps_ = 0;  // gaps seen since the last (re)baseline
  long long used_ = 0;  // gaps in theta_
  long long arrivals_ = 0;
  EventTime last_ = 0;
  double slower_ = 0.0, faster_ = 0.0;
  EventTime slower_start_ = 0, faster_start_ = 0;
  std::optional<ArrivalShape> shape_;
  double last_score_ = std::numeric_limits<double>::quiet_NaN();
};

}  // namespace plumbline
