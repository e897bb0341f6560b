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
// rho_up = 2, k_up = 2 ln 2; with rho_down = 1/2, k_down = ln 2. The cap keeps one
// spike from firing the chart (an isolated |z| = 10 adds at most cap - k_up).
// Decision intervals come from the exact Markov chain for the capped chi-square
// increment (run_length_chain.h).
//
// A level shift also inflates z^2. So that it is not reported as a variance
// change, each side keeps the sum and sum of squares of z over its current
// excursion and fires only when the spread about the excursion's own mean, v,
// carries more of the change than the mean m does: (v - 1) > m^2 for the wider
// side (common practice, no source); the level detectors report level shifts.
#pragma once

#include <string>

#include "detectors/detection.h"
#include "detectors/event_time.h"
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
  double wider_statistic() const { return up_.statistic; }
  double narrower_statistic() const { return down_.statistic; }

 private:
  struct Side {
    double statistic = 0.0;
    EventTime start = 0;
    double n = 0, sum = 0, sum_sq = 0;  // of z over the excursion
  };
  VarianceCusumOptions options_;
  double k_up_, k_down_;
  Side up_, down_;
};

}  // namespace plumbline
