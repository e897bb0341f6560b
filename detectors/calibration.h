// Calibration: turns "a false alarm no more often than once every ARL0 readings,
// and catch shifts of D residual standard deviations" into detector thresholds,
// and predicts run lengths for given thresholds. Pure computation, no globals
// that change, deterministic; every function is safe to call from any thread.
//
// Terms
// -----
// Run length: readings from the start of a detector (or its restart after an
// alarm) up to and including the reading at which it fires. ARL = average run
// length. ARL0 = in-control ARL: readings i.i.d. N(0, 1), so 1 / ARL0 is the
// long-run false-alarm rate per reading. ARL(shift): readings i.i.d.
// N(shift, 1) from the first reading on ("zero-state" ARL). Shift and every
// threshold below are in standard deviations of the standardised input.
//
// CUSUM: Markov chain of Brook and Evans (1972)
// ---------------------------------------------
// One side, S_t = max(0, S_{t-1} + x_t - k), signal when S_t > h, is a Markov
// process on [0, h]. Discretise it into an atom {0} and m cells of width
// w = h / m, ((j-1) w, j w], represented by their midpoints c_j = (j - 1/2) w:
//
//   R(i, 0) = Phi(k - mu - c_i)                                    (to zero)
//   R(i, j) = Phi(j w - c_i + k - mu) - Phi((j-1) w - c_i + k - mu)
//   ARL vector a = (I - R)^{-1} 1,   ARL from start s: 1 + sum_j R(s, j) a_j
//
// with mu the mean of x. The discretisation error is smooth in w, O(w^2), so
// two chains, m and 2m cells, are combined by Richardson extrapolation,
// (4 a_{2m} - a_m) / 3; w <= 0.2 (at least 40 cells) then reproduces the
// integral-equation values of REFERENCES.md 1.1 and 2.x to about 1e-5. Moves
// farther than 8.5 sd (probability < 1e-17) are dropped, which makes I - R a
// band matrix; it is row diagonally dominant (rows of R sum to at most 1), so
// it is solved by banded Gaussian elimination without pivoting, in
// O(m * bandwidth^2). That keeps one evaluation at a millisecond or so even
// when a tiny k and a huge ARL0 need h in the hundreds.
//
// Two sides (lower side = upper side with mu -> -mu), started at 0:
//   1/ARL = 1/ARL+ + 1/ARL-
// and started at a headstart s on both sides (REFERENCES.md 2.3, COMP-checked
// against Lucas and Crosier 1982):
//   ARL(s) = [L+(s) L-(0) + L-(s) L+(0) - L+(0) L-(0)] / [L+(0) + L-(0)]
// The combination is exact when h <= 2k (the two sides are then never positive
// together); otherwise it is an approximation, which Monte Carlo confirms to
// about 0.1% for k = 0.5, h = 4 and 5 (REFERENCES.md 1.1, 2.1, 2.2).
//
// Siegmund's (1985) approximation, one side with drift D = mu - k (upper) or
// -mu - k (lower) and b = h + 1.166:
//   ARL ~ [exp(-2 D b) + 2 D b - 1] / (2 D^2),   b^2 when D = 0.
// Good near and below the design shift, poor for large shifts (REFERENCES 1.2).
//
// EWMA: Markov chain of Lucas and Saccucci (1990)
// -----------------------------------------------
// z_t = lambda x_t + (1 - lambda) z_{t-1}, z_0 = 0, fixed asymptotic limits
// +/- U, U = L sqrt(lambda / (2 - lambda)). Discretise [-U, U] into m cells of
// width w = 2U / m with midpoints c_i; for cell j = (l_j, u_j]
//   R(i, j) = Phi(b_i(u_j)) - Phi(b_i(l_j)),   b_i(z) = (z - (1-lambda) c_i) / lambda - mu
// ARL from z_0 = 0 as for the CUSUM, again with Richardson extrapolation over
// m and 2m cells, m chosen so that w / lambda is about 0.2 (the chain's error
// is governed by the cell width relative to the spread of one step, lambda);
// this reproduces the integral-equation values of REFERENCES.md 3 to 1e-4. These ARLs are for the fixed limits; the Ewma class's
// exact time-varying limits (its default) give a slightly shorter ARL0, so
// DesignDetectors switches them off to keep the ARL0 promise.
//
// Choosing lambda (ChooseEwmaLambda): Lucas and Saccucci's design procedure,
// done numerically rather than read off their figures: for the target ARL0,
// calibrate L for each lambda on a grid, compute ARL(shift), and take the
// lambda that minimises it (refined by golden-section search on log lambda).
// The outcome follows their guidance, small lambda for small shifts (from
// memory of their tables: about 0.05 for a 0.5-sd shift and 0.1 to 0.15 for
// 1 sd at ARL0 = 500; the search gives 0.047 and 0.134 there, 0.36 for 2 sd
// and 0.68 for 3 sd; longer ARL0s favour smaller lambda). lambda is kept in
// [0.02, 1]: below 0.02 the chart reacts slowly to shifts larger than the one
// it was tuned for, for a marginal gain at the design shift.
//
// Page-Hinkley and BOCPD: seeded simulation tables
// ------------------------------------------------
// The running-mean Page-Hinkley test and Bayesian online change-point
// detection have no closed-form or Markov-chain ARL, so their thresholds come
// from seeded Monte Carlo on i.i.d. N(0, 1) input, tabulated by the committed
// tool tests/tools/tabulate_thresholds.cc into detectors/threshold_tables.inc
// (its header comment gives the command, seed, runs per point and standard
// errors). Designs tabulated:
//   Page-Hinkley: PageHinkleyOptions defaults (running mean, alpha = 1) with
//     delta on a grid of half-shifts, 0.025 .. 3 (the design rule is
//     delta = shift / 2); lambda for ARL0 = 10 .. 1e5, four points a decade.
//   BOCPD: BocpdOptions defaults (hazard, prior, run-length cap, pruning,
//     window, arming delay) with the alarm threshold for ARL0 = 10 .. 2e4.
// A run is one detector from a fresh start to its first alarm; the
// Page-Hinkley test restarts after an alarm, so its ARL0 is also the mean
// time between false alarms. Bocpd does not restart by itself: a caller that
// wants the same spacing between later false alarms resets it after an alert.
// Look-ups interpolate the threshold linearly in log(ARL0) (and, for
// Page-Hinkley, linearly in log(delta) between grid rows); BOCPD's threshold
// C in (0, 1 - hazard) is interpolated on the logit scale log(C / (1 - hazard
// - C)) the table was made on. Beyond the grid they extrapolate linearly in
// log(ARL0) from the last two points (the asymptotics of CUSUM-like
// statistics: ARL0 grows exponentially in the threshold; the generator's
// Markov-chain analogue, the CUSUM, loses under 1% this way from 1e5 to 4e7
// for k >= 0.125, 4% at k = 0.05 and 13% at k = 0.025), and below the
// smallest delta linearly in log(delta); such results are flagged as
// extrapolated, and their ARL0 is an estimate, not a tabulated fact. Cells no
// threshold can reach are refused with OutOfRange: a large delta cannot give
// a short ARL0 (x - xbar > delta alone is rarer), nor can BOCPD fire before
// it arms (min_readings).
//
// Several detectors at once (DesignDetectors)
// -------------------------------------------
// With agree = 1 an alert is raised when any one of n detectors fires. By the
// union bound the combined false-alarm rate is at most the sum of the rates,
// sum 1/ARL0_i, so calibrating each detector to ARL0_i = n * ARL0 keeps the
// combined ARL0 >= ARL0 (conservatively: detectors watching the same stream
// tend to fire together, so the true combined ARL0 is usually longer). In
// general an alert needs alarms from `agree` different detectors; if each
// alarm counts towards at most one alert (the cooldown after an alert is at
// least the agreement window), alerts <= (sum of alarms) / agree, so each
// detector is calibrated to ARL0_i = ARL0 * n / agree, which is the union
// bound for agree = 1 and plain ARL0 for agree = n.

#pragma once

#include <cstdint>
#include <functional>
#include <memory>
#include <string>
#include <vector>

#include "detectors/bocpd.h"
#include "detectors/cusum.h"
#include "detectors/event_time.h"
#include "detectors/ewma.h"
#include "detectors/page_hinkley.h"
#include "detectors/profile.h"
#include "detectors/status.h"

namespace plumbline {

// Valid ranges of the user-facing targets.
inline constexpr double kMinTargetArl0 = 10.0;
inline constexpr double kMaxTargetArl0 = 1e7;
inline constexpr double kMaxTargetShift = 10.0;  // shift in (0, 10]

// ---------------------------------------------------------------- CUSUM ----

// ARL of the tabular CUSUM (Brook-Evans Markov chain with Richardson
// extrapolation) with reference value k > 0 (finite), decision interval h > 0,
// readings N(shift, 1), both sides started at 0 <= headstart < h (absolute, in
// sd). sides = 2: the two-sided chart of Cusum; sides = 1: the upper side
// alone (a shift > 0 moves towards it). Fails with InvalidArgument on
// out-of-range arguments (|shift| <= 20) and OutOfRange when h / 0.2 exceeds
// the 200000-cell limit of the chain.
StatusOr<double> CusumArl(double k, double h, double shift, double headstart = 0.0,
                          int sides = 2);

// Siegmund's approximation of the same zero-start ARL (see above), as a cross
// check. Same argument rules (no headstart).
StatusOr<double> CusumArlSiegmund(double k, double h, double shift, int sides = 2);

// The h for which the two-sided CUSUM with reference value k has in-control
// ARL arl0, with a headstart of headstart_fraction * h (0 <= fraction < 1; the
// usual fast-initial-response choice is 0.5). Solved to 1e-7 relative in h by
// false position (Illinois) on log ARL, bracketed around Siegmund's estimate:
// about 5 chain evaluations. Fails with InvalidArgument for arl0 outside
// [1, 1e12] or non-finite values, and OutOfRange when even h = 0 gives an ARL0
// above arl0 (k too large for so short a target: a Shewhart chart at k
// already signals more rarely) or h would exceed the chain's limit.
StatusOr<double> CalibrateCusumH(double arl0, double k, double headstart_fraction = 0.0);

// ----------------------------------------------------------------- EWMA ----

// Zero-state ARL of the two-sided EWMA with fixed asymptotic limits (Lucas and
// Saccucci Markov chain, Richardson-extrapolated), 0 < lambda <= 1, width
// L > 0, readings N(shift, 1), |shift| <= 20. Fails with InvalidArgument
// otherwise, OutOfRange when the chain would need more than 20000 cells.
StatusOr<double> EwmaArl(double lambda, double width, double shift);

// The width L giving in-control ARL arl0 in [1, 1e12] at this lambda (to 1e-7
// relative). Fails with InvalidArgument or OutOfRange as EwmaArl.
StatusOr<double> CalibrateEwmaL(double arl0, double lambda);

// The lambda in [0.02, 1] minimising ARL(shift) subject to ARL0 = arl0 (see
// above). Costs about 100 coarse chain evaluations (under 0.1 s).
StatusOr<double> ChooseEwmaLambda(double arl0, double shift);

// --------------------------------------------------- simulation tables ----

// A threshold read off a simulation table.
struct TableLookup {
  double value = 0.0;         // the threshold (or, for the inverse look-ups, the ARL0)
  bool extrapolated = false;  // outside the tabulated ARL0 (or delta) range
  // Relative standard error of the simulated ARL0 at the nearest table points
  // (the Monte Carlo uncertainty of the table itself, not of extrapolation).
  double relative_error = 0.0;
};

// Page-Hinkley lambda for in-control ARL arl0 in [1, 1e12] at drift tolerance
// delta in (0, 20], for PageHinkleyOptions defaults otherwise (running mean,
// alpha = 1). Table interpolation, see above. InvalidArgument for arguments
// out of range, OutOfRange for an ARL0 no lambda reaches at this delta.
StatusOr<TableLookup> PageHinkleyLambdaFor(double arl0, double delta);
// The inverse: predicted ARL0 of lambda > 0 at delta > 0.
StatusOr<TableLookup> PageHinkleyArl0For(double lambda, double delta);

// BOCPD alarm threshold for in-control ARL arl0 in [1, 1e12], for BocpdOptions
// defaults otherwise. OutOfRange below the shortest ARL0 BOCPD can give (it
// cannot fire before min_readings readings).
StatusOr<TableLookup> BocpdThresholdFor(double arl0);
// The inverse: predicted ARL0 of a threshold in (0, 1 - hazard) (extrapolated
// outside the tabulated thresholds).
StatusOr<TableLookup> BocpdArl0For(double threshold);

// True when the committed tables were generated for the current defaults of
// PageHinkleyOptions and BocpdOptions (apart from the tabulated parameters);
// otherwise false with *why naming the option that changed. A false here
// means tests/tools/tabulate_thresholds must be rerun.
bool ThresholdTablesMatchDefaults(std::string* why);

// ------------------------------------------------------------ Monte Carlo ----

// One detector under simulation: consumes a reading, returns true when it fires.
using RunLengthStep = std::function<bool(double x, EventTime time)>;

struct RunLengthEstimate {
  double mean = 0.0;            // mean run length (or detection delay), readings
  double standard_error = 0.0;  // of the mean
  double median = 0.0;          // median run length (or delay), readings
  int runs = 0;                 // runs that count towards the mean
  int censored = 0;             // runs stopped at the cap (counted as the cap)
  int discarded = 0;            // runs that fired before the change (delay mode)
};

// Seeded Monte Carlo of run lengths. Each run gets a fresh detector from
// `make` and its own generator seeded from (seed, run index), so the result
// depends only on the arguments. Readings are N(0, 1) for the first
// `change_after` readings and N(shift, 1) afterwards. With change_after = 0 the
// result is the zero-state ARL at `shift`; with change_after > 0 it is the
// mean delay (readings after the change up to and including the alarm) among
// runs without an alarm before the change, which are discarded and replaced.
// A run that reaches `cap` readings stops and counts as cap (censored).
// Fails with InvalidArgument for runs < 2, change_after < 0, cap <=
// change_after or a non-finite shift, and FailedPrecondition when more than half the attempted
// runs fire before the change.
StatusOr<RunLengthEstimate> SimulateRunLength(const std::function<RunLengthStep()>& make,
                                              double shift, int runs, std::uint64_t seed,
                                              std::int64_t cap,
                                              std::int64_t change_after = 0);

// ------------------------------------------------------------------ design ----

// Calibrated options for the requested detectors; only the requested ones
// are meaningful (`has_*`). Each options struct has its arl0 field set to the
// ARL0 it was calibrated for (per_detector_arl0).
struct DetectorDesign {
  double target_arl0 = 0.0;        // what the user asked for (combined)
  double per_detector_arl0 = 0.0;  // what each detector was calibrated to
  double shift = 0.0;
  int agree = 1;
  std::vector<DetectorKind> detectors;
  bool has_cusum = false, has_page_hinkley = false, has_bocpd = false, has_ewma = false;
  CusumOptions cusum;
  PageHinkleyOptions page_hinkley;
  BocpdOptions bocpd;
  std::shared_ptr<const RunLengthTables> bocpd_tables;  // made for bocpd (has_bocpd)
  EwmaOptions ewma;
  bool page_hinkley_extrapolated = false;  // threshold read beyond the table
  bool bocpd_extrapolated = false;
};

// Designs each detector for target in-control ARL arl0 in [10, 1e7] and
// smallest shift worth catching shift in (0, 10] (in residual sd):
//   CUSUM: k = shift/2 (capped at half the two-sided Shewhart limit for the
//     per-detector ARL0, z/2 with 2 Phi(-z) = 1/ARL0, so a positive h exists;
//     a larger k would only turn the CUSUM into a Shewhart chart; our rule,
//     no published source), no headstart, h = CalibrateCusumH.
//   EWMA: lambda = ChooseEwmaLambda, fixed limits, L = CalibrateEwmaL.
//   Page-Hinkley: delta = shift/2 with the same cap as the CUSUM's k, running
//     mean (the PageHinkleyOptions default), lambda from the table.
//   BOCPD: defaults, threshold from the table.
// detectors must be non-empty without repeats; 1 <= agree <= detectors.size().
// Each detector is calibrated to arl0 * detectors.size() / agree (the union
// bound for agree = 1, see above). Fails with InvalidArgument naming the bad
// argument, or with the status of a calibration that cannot be done.
StatusOr<DetectorDesign> DesignDetectors(double arl0, double shift,
                                         const std::vector<DetectorKind>& detectors,
                                         int agree = 1);

}  // namespace plumbline
