// VarianceCusum: detects a lasting change in the spread of standardised
// residuals z (in control N(0,1)). Not thread-safe; owned by one shard.
//
// Two one-sided CUSUMs on the capped square q = min(z^2, cap):
//
//   wider    (variance x rho_up):    U = max(0, U + q - k_up),   k_up   = rho ln(rho)/(rho - 1), rho = rho_up
//   narrower (variance x rho_down):  D = max(0, D + k_down - q), k_down = rho ln(rho)/(rho - 1), rho = rho_down
//
// k is the log-likelihood-ratio reference value for a normal variance moving
// from 1 to rho, scaled by 2 rho / (rho - 1) (Hawkins & Olwell 1998, "Cumulative
// Sum Charts and Charting for Quality Improvement", Springer, ch. 6; MEM). With
// rho_up = 2, k_up = 2 ln 2; with rho_down = 1/2, k_down = ln 2. Decision
// intervals come from the exact Markov chain for the capped chi-square
// increment (run_length_chain.h).
//
// Spikes. The cap bounds what one reading adds to U (cap - k_up = 10.9), but that
// alone does not stop a spike from firing a chart that is already above
// h - cap + k_up, which an in-control U is a quarter of the time at ARL0 500
// (3% at 5000). So a reading with |z| >= 6 (probability 2e-9 under N(0, 1)) is
// held for one reading: if the next reading is also at or beyond the cap
// (z^2 >= cap), both count, in order; otherwise the held one was an isolated
// spike and is dropped (common practice, no source). The in-control calibration
// and the power against a doubled variance (|z| >= 6 has probability 2e-5 at
// sd 1.41) are unaffected; a reading between the cap and 6 sigma still counts,
// capped.
//
// A level shift also inflates z^2. So that it is not reported as a variance
// change, the wider side fires only when a change of spread explains its current
// excursion z_1..z_n better than a change of level: with each alternative's
// log-likelihood ratio against N(0, 1) maximised over the start tau of the
// changed segment z_tau..z_n (length L, sum S, mean square s2),
//
//   level  N(delta, 1):  max_tau S^2 / (2 L)
//   spread N(0, rho):    max_tau L/2 (s2 - 1 - ln s2)   (terms with s2 > 1)
//
// the spread's must be the larger (both alternatives have two free parameters,
// tau and delta or rho; a generalised likelihood-ratio comparison in the spirit
// of Hinkley 1970, Biometrika 57:1-17; MEM). While the gate holds the alarm back
// the statistic keeps counting; the level detectors report the level shift and
// the monitor resets this chart. Measured on seeded simulations
// (tests/detectors/variance_cusum_test.cc): a 1, 2 or 3 sigma level shift gives a
// variance alarm within 50 readings in 1-1.6% of runs at ARL0 5000 (the
// in-control rate over 50 readings is about 1%); the earlier rule "(v - 1) > m^2 with
// v, m the spread and mean of the whole excursion" let 15-38% through, because an
// excursion that began before the shift mixes two levels. The gate also holds
// back some in-control excursions that look like level shifts: the in-control ARL
// comes out 3% (ARL0 5000) to 10% (ARL0 500) above the chain's design value,
// and a doubled variance is detected about 1-2 readings later.
#pragma once

#include <cstddef>
#include <string>
#include <vector>

#include "detectors/detection.h"
#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

struct VarianceCusumOptions {
  double rho_up = 2.0;     // variance ratio to detect upwards, (1, 100]
  double rho_down = 0.5;   // variance ratio to detect downwards, [0.01, 1)
  double cap = 12.25;      // cap on z^2 (3.5 sigma), > k_up
  double up_h = 15.0;      // decision interval of the wider side, > 0
  double down_h = 15.0;    // decision interval of the narrower side, > 0

  bool IsValid(std::string* why) const;
  double k_up() const;
  double k_down() const;
  // Decision intervals for a target ARL0 (in readings) for the pair of sides.
  static StatusOr<VarianceCusumOptions> Calibrated(double arl0);
};

class VarianceCusum {
 public:
  explicit VarianceCusum(const VarianceCusumOptions& options);

  // Direction kUp: spread grew; kDown: spread shrank. shift = estimated ratio of
  // standard deviations (new / old) over the excursion. Non-finite z is ignored.
  Alarm Update(double z, EventTime time);
  void Reset();
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);
  // Replaces the decision intervals (after an empirical re-fit); both > 0.
  void SetDecisionIntervals(double up_h, double down_h);
  const VarianceCusumOptions& options() const { return options_; }
  double wider_statistic() const { return up_.statistic; }
  double narrower_statistic() const { return down_.statistic; }

 private:
  struct Side {
    double statistic = 0.0;
    EventTime start = 0;
    double n = 0, sum = 0, sum_sq = 0;  // of z over the excursion
  };
  // One reading of the CUSUM pair (after the spike rule of Update).
  Alarm Step(double z, EventTime time);
  // The level-shift gate of the wider side (see the header).
  bool SpreadExplainsExcursion() const;

  // |z| at or above this is held for one reading (see the header).
  static constexpr double kSpike = 6.0;
  // The gate looks at the last kExcursionValues to 2 kExcursionValues readings.
  static constexpr size_t kExcursionValues = 2048;

  VarianceCusumOptions options_;
  double k_up_, k_down_;
  Side up_, down_;
  std::vector<double> excursion_;  // z over the wider side's current excursion
  bool has_spike_ = false;         // a reading with |z| >= kSpike is being held
  double spike_z_ = 0.0;
  EventTime spike_time_ = 0;
};

}  // namespace plumbline
