// PoissonCusum: the count CUSUM of Lucas (1985) for low-count series (events
// per bucket, errors per minute), with its exact average run lengths by the
// Markov chain and a calibration of the decision interval. Not thread-safe:
// owned by one shard, like all per-series state; the free functions are pure
// and thread-safe.
//
// Mathematics
// -----------
// Input: counts X_t in {0, 1, 2, ...}, in control i.i.d. Poisson(mu0).
//
//   upper (increase):  S_t = max(0, S_{t-1} + X_t - k)        S_0 = s
//   lower (decrease):  T_t = max(0, T_{t-1} + k_down - X_t)   T_0 = s_down
//
// Signal rule, chosen explicitly (PoissonSignalRule), the same for both sides:
//   kAtLeast: signal when S_t >= h   (the rule Lucas 1985 is recalled to use; MEM)
//   kAbove:   signal when S_t > h    (the rule of detectors/cusum.h)
// With integer k and h the statistic is an integer, and the two rules differ
// by a whole count: ">= h" is "> h - 1". The default is kAtLeast. Ties are
// judged with a tolerance of 1e-9 (1 + h), so a statistic that should equal h
// exactly but carries rounding from a non-integer k is treated as equal.
//
// Reference value. The Poisson likelihood ratio for mu0 -> mu1 gives
//   k = (mu1 - mu0) / (ln mu1 - ln mu0)
// for the upper side (mu1 > mu0) and the same formula with mu1 < mu0 for the
// lower side (Lucas 1985; MEM). k lies between mu0 and mu1.
// PoissonCusumReferenceValue computes it.
//
// Exact run lengths (Brook and Evans 1972). With k = a/d, h = b/d and s = c/d
// for integers a, b, c and a denominator d >= 1, d S_t is an integer
// (d S_t = max(0, d S_{t-1} + d X_t - a)), so the chain on the scaled states
// 0..b-1 (kAtLeast) or 0..b (kAbove) is exact: from state i the upper side
// moves to 0 with P(X <= floor((a - i) / d)) and to j > 0 with P(X = (j - i + a)/d)
// when that is a whole number (0 otherwise); the lower side moves to 0 with
// P(X >= ceil((i + a)/d)) and to j > 0 with P(X = (i + a - j)/d). The ARL vector
// solves (I - R) L = 1. Lucas (1985) scales a rational k the same way (MEM).
// With d = 1 (integer k and h) this is the chain of REFERENCES.md 7.1, which
// the tests reproduce to 0.1%. A non-integer k that is not a multiple of 1/d
// for a small d (<= 1000, at most kMaxChainStates states) is refused, not
// approximated: round k (CalibratePoissonCusum does).
//
// A time-varying in-control mean. When reading t's in-control mean is
// mu_t = r_t mu0 (a seasonal forecast of a count), the chart for the same
// relative change (mu1 / mu0 fixed) has reference values r_t k and r_t k_down:
// Lucas's k is mu0 (q - 1) / ln q for q = mu1 / mu0, proportional to mu0, and
// the increments stay the log-likelihood ratio of the change over ln q
// (the count regression chart of Hoehle and Paul 2008; MEM). The exact chain
// holds only for a constant mean; with a moving one, h from the chain at the
// average mean is a design value, which SeriesMonitor checks against the
// observed increments (its empirical re-fit).
//
// Fast initial response (Lucas and Crosier 1982): start (and restart after
// each signal) at a headstart 0 <= s < h, usually h/2. REFERENCES.md 7.1 gives
// the exact ARLs for s = 5, h = 10.
//
// Change-time and shift estimates. An excursion of a side is the run of
// readings since the last reading at which it was zero, or since the
// (re)start if it has not been zero since. When a side signals after an
// excursion of N readings that began at reading tau and started from value
// C0 (0 after a zero, the headstart from a restart):
//   change_at = time of reading tau
//   shift     = (mean count over the excursion) - mu0, where the mean is
//               k + (S_t - C0)/N (upper) or k_down - (T_t - C0)/N (lower).
// Direction is kUp for the upper side and kDown for the lower.
//
// Assumptions: independent counts with a known in-control mean mu0 per
// reading (equal bucket lengths). Overdispersed counts (variance above the
// mean) shorten the in-control run length well below the Poisson ARL0.
//
// Valid ranges: mu0 > 0; k, k_down > 0; h, h_down > 0; 0 <= headstart < h;
// all finite. For a useful chart mu0 < k (upper) and k_down < mu0 (lower).
//
// Sources: Hoehle, M. and Paul, M. (2008), "Count data regression charts for
// the monitoring of surveillance time series", Computational Statistics and
// Data Analysis 52(9):4357-4368 (MEM). Lucas, J. M. (1985), "Counted data CUSUM's", Technometrics
// 27(2):129-144 (MEM). Brook, D. and Evans, D. A. (1972), "An approach to the
// probability distribution of CUSUM run length", Biometrika 59:539-548.
// Lucas, J. M. and Crosier, R. B. (1982), Technometrics 24:199-205.
//
// Choosing parameters: pick mu1, the smallest mean worth catching quickly;
// take k from the formula above, rounded (to a whole count when that moves it
// by 5% or less, otherwise to a multiple of 1/2, 1/3, ...); then pick the
// smallest h whose exact ARL0 reaches the target. CalibratePoissonCusum does
// all three; for example mu0 = 2, mu1 = 4 gives k = 3 (2.885 rounded) and
// h = 6 for ARL0 >= 400 (ARL0 412.5, REFERENCES.md 7.1). For a two-sided
// chart calibrate each side for 2 ARL0 (1/ARL0 ~= 1/ARL0_up + 1/ARL0_down).
#pragma once

#include <cstdint>
#include <optional>
#include <string>
#include <string_view>

#include "detectors/detection.h"
#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

// When a side signals: S >= h or S > h.
enum class PoissonSignalRule { kAtLeast, kAbove };
std::string_view ToString(PoissonSignalRule rule);  // "at_least", "above"
std::optional<PoissonSignalRule> PoissonSignalRuleFromString(std::string_view text);

// Which side of the count CUSUM: upper (an increase) or lower (a decrease).
enum class PoissonCusumSide { kUpper, kLower };
std::string_view ToString(PoissonCusumSide side);  // "upper", "lower"
std::optional<PoissonCusumSide> PoissonCusumSideFromString(std::string_view text);

struct PoissonCusumOptions {
  // Defaults: the REFERENCES.md 7.1 design mu0 = 2, k = 3 (Lucas's k for
  // mu0 -> 4, rounded), h = 6, S >= h: upper ARL0 412.5, ARL 6.2 at mu = 4. The
  // lower side, k_down = 1 (mu0 -> 0.5 gives 1.08), h_down = 4: ARL0 1234,
  // ARL 7.5 at mu = 0.5 (exact chain).
  double mu0 = 2.0;        // in-control mean count per reading: finite, > 0
  double k = 3.0;          // upper reference value: finite, > 0
  double h = 6.0;          // upper decision interval: finite, > 0
  double headstart = 0.0;  // upper start and restart value: 0 <= headstart < h
  bool two_sided = false;  // also run the lower side, for a decrease
  double k_down = 1.0;     // lower reference value: finite, > 0
  double h_down = 4.0;     // lower decision interval: finite, > 0
  // Lower start and restart value: 0 <= headstart_down < h_down.
  double headstart_down = 0.0;
  PoissonSignalRule rule = PoissonSignalRule::kAtLeast;  // both sides
  double arl0 = 0.0;  // in-control ARL h was calibrated for; 0 = not calibrated

  // True when every option is in range. Otherwise false, and *why (if not
  // null) names the first bad option and its valid range. The lower-side
  // options are checked only when two_sided is set.
  bool IsValid(std::string* why) const;
};

class PoissonCusum {
 public:
  // Checks the options; returns InvalidArgument naming the bad option otherwise.
  static StatusOr<PoissonCusum> Create(const PoissonCusumOptions& options);

  // Precondition: options.IsValid(nullptr). Prefer Create for options from
  // users or config.
  explicit PoissonCusum(const PoissonCusumOptions& options);

  // Adds the count observed in one reading at `time`. Returns the alarm (fired
  // only at the reading where a side reaches its signal rule; both sides then
  // restart at their headstarts). Alarm::statistic is the upper S_t for a
  // one-sided chart and max(S_t, T_t) for a two-sided one, after this reading
  // (before the restart). Fails with InvalidArgument, leaving all state
  // untouched, when count is NaN, infinite, negative or not a whole number.
  // Allocation-free on success.
  StatusOr<Alarm> Update(double count, EventTime time) { return Update(count, time, 1.0); }

  // The same for a reading whose in-control mean is mean_ratio * mu0 (a
  // seasonal forecast): both reference values are scaled by mean_ratio (see
  // "A time-varying in-control mean" above), and Alarm::shift is the mean over
  // the excursion of (count - mean_ratio * mu0). mean_ratio must be finite
  // and > 0; otherwise InvalidArgument, state untouched.
  StatusOr<Alarm> Update(double count, EventTime time, double mean_ratio) {
    return Update(count, time, mean_ratio, mean_ratio);
  }

  // The same with the lower side's reference scaled by down_ratio (finite,
  // >= 0) instead: a caller that floors mean_ratio to keep the upper side from
  // taking any count at a near-zero forecast as a change passes the unfloored
  // ratio here, since a zero count where almost none is expected is no
  // evidence of a fall (the log-likelihood ratio of a fall, mu_t (1 - q) for
  // a zero, vanishes with mu_t). Otherwise InvalidArgument, state untouched.
  StatusOr<Alarm> Update(double count, EventTime time, double mean_ratio, double down_ratio);

  // Back to the start state: both sides at their headstarts, counters cleared.
  void Reset();

  // New decision intervals (an empirical re-fit), state kept; each must be
  // finite, > 0 and above its side's headstart, else that side keeps its own.
  void SetDecisionIntervals(double h, double h_down);

  double upper() const { return upper_.value; }  // S_t
  double lower() const {
    return lower_.value;
  }  // T_t (stays at headstart_down if one-sided)
  // Readings in each side's current excursion (0 when at zero or just restarted).
  std::int64_t upper_length() const { return upper_.length; }
  std::int64_t lower_length() const { return lower_.length; }
  // Time of the first reading of each side's current excursion; meaningful
  // only when the matching length is > 0.
  EventTime upper_start() const { return upper_.start; }
  EventTime lower_start() const { return lower_.start; }
  std::int64_t readings_since_restart() const { return readings_; }
  std::int64_t alarms() const { return alarms_; }  // signals since construction or Reset

  const PoissonCusumOptions& options() const { return options_; }
  double arl0() const { return options_.arl0; }  // 0 = not calibrated

  // Options and state, for checkpoints. Load refuses options that are not
  // valid and state out of range (negative statistics, counts beyond the
  // snapshot limit), with a corruption status naming the field.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

 private:
  // One side: value, excursion bookkeeping. Values within kZero of 0 count as
  // 0 so that rounding from a non-integer k cannot open a false excursion.
  struct Side {
    double value = 0.0;
    double origin = 0.0;      // value the current excursion started from
    std::int64_t length = 0;  // readings in the current excursion
    EventTime start = 0;      // time of its first reading
    double excess = 0.0;      // sum over the excursion of count - in-control mean
    void Restart(double headstart);
    void Step(double increment, double deviation, EventTime time, double zero);
  };
  bool Signals(double value, double h) const;
  void Restart();

  PoissonCusumOptions options_;
  double zero_up_, zero_down_;  // tie tolerances, 1e-9 (1 + h)
  Side upper_;
  Side lower_;
  std::int64_t readings_ = 0;
  std::int64_t alarms_ = 0;
};

// k = (mu1 - mu0) / (ln mu1 - ln mu0) (Lucas 1985). Both means finite and > 0
// and different; otherwise InvalidArgument.
StatusOr<double> PoissonCusumReferenceValue(double mu0, double mu1);

// The largest number of transient states the exact chain builds (a dense
// solve of this size takes about a second).
inline constexpr int kMaxChainStates = 2000;

// Exact zero-state (or headstart) ARL of one side of the count CUSUM when the
// counts are Poisson(mu): the mean number of readings until the first signal,
// starting from S_0 = start. Requires mu > 0, k > 0, h > 0, 0 <= start < h,
// all finite, and k, h and start multiples of a common 1/d with d <= 1000 and
// at most kMaxChainStates scaled states; otherwise InvalidArgument. The
// lower side's ARL is finite only for k > 0 (always true here).
StatusOr<double> PoissonCusumArl(double mu, double k, double h, double start,
                                 PoissonSignalRule rule,
                                 PoissonCusumSide side = PoissonCusumSide::kUpper);

// A calibrated one-sided design.
struct PoissonCusumDesign {
  PoissonCusumSide side = PoissonCusumSide::kUpper;  // upper if mu1 > mu0
  double reference_value = 0.0;                      // Lucas's k before rounding
  double k = 0.0;  // rounded k = numerator / k_denominator
  int k_denominator = 1;
  double h = 0.0;     // smallest whole h with ARL(mu0) >= target
  double arl0 = 0.0;  // exact ARL at mu0 for (k, h)
  double arl1 = 0.0;  // exact ARL at mu1 for (k, h)
};

// Designs one side for detecting mu0 -> mu1 (upper when mu1 > mu0, lower when
// mu1 < mu0) with in-control ARL >= arl0, zero start, and the given rule.
// k is Lucas's reference value rounded to a multiple of 1/k_denominator; with
// k_denominator = 0 (automatic) the smallest d in 1..20 whose rounding moves k
// by at most 5% (else the d in 1..20 that moves it least). h is the smallest
// whole number whose exact ARL0 reaches arl0 (ARL0 grows with h). Fails with
// InvalidArgument for bad means (non-finite, <= 0, equal), arl0 < 1 or
// k_denominator outside 0..1000, and OutOfRange when arl0 needs more than
// kMaxChainStates scaled states.
StatusOr<PoissonCusumDesign> CalibratePoissonCusum(
    double mu0, double mu1, double arl0,
    PoissonSignalRule rule = PoissonSignalRule::kAtLeast, int k_denominator = 0);

// The mid-p quantile residual of a count y under Poisson(mean): with F the
// Poisson distribution function and p its mass,
//
//   r = Phi^-1( F(y - 1) + p(y) / 2 ),
//
// taken as -Phi^-1( P(Y > y) + p(y) / 2 ) where that tail is the smaller, so a
// count far above its mean keeps full precision. It is the randomised quantile
// residual of Dunn and Smyth (1996, "Randomized quantile residuals", J. Comput.
// Graph. Statist. 5:236-244; from memory) with the uniform draw replaced by its
// mean (mid-p), so replay stays deterministic. Near N(0, 1) in its tails
// however small the mean, where (y - mean) / sqrt(mean) is not: a count of 2
// at mean 0.4 gives 1.81 here and 2.53 there, a count of 3 gives 2.63 and 4.11.
// y is rounded down to a whole count at least 0; mean must be > 0 (NaN
// otherwise) and below about 700, where exp(-mean) still holds a double (the
// monitor asks below kLowCountMean).
// Checked against scipy (tests/reference/poisson_quantile_residual.py).
double PoissonMidPQuantileResidual(double y, double mean);

}  // namespace plumbline
