// ResidualProfile: what the forecaster's smooth seasonal terms miss, by phase
// of a season. Sharp, regular shapes (a defrost spike 20 minutes wide in an
// 8-hour cycle) and noise that depends on the time of day (orders vary more in
// the afternoon than at night) leave residuals whose mean and spread follow the
// phase. This keeps, per phase bin b, a running mean m_b and a robust running
// second moment s2_b of the residual, shrunk toward the whole series' values:
//
//   m_b   <- m_b  + (r - m_b) / min(n_b, window)            (r clipped at 4 sigma_b)
//   s2_b  <- s2_b + (min(q^2, c^2 k_b) / m(c) - s2_b) / min(n_b, window),  q = a / sigma_all
//
// where r is the residual and a the standardisation's input at that reading
// (the residual after this mean is removed and after whitening).
// s2_b is the phase's variance as a ratio k_b to the whole series' scale
// sigma_all (ResidualScale, which follows the overall level of the noise within
// a few hundred readings): the shape of the spread over the phases is learned
// slowly, bin by bin, while its overall size follows the series at once.
//   mean_b  = n_b / (n_b + n0) * m_b
//   k_b     = (n_b s2_b + n0) / (n_b + n0),    sigma_b = sigma_all sqrt(k_b)
//
// with n0 = kPrior readings of shrinkage (empirical-Bayes style partial pooling,
// common practice, no source) and m(c) the clipped second moment of N(0,1)
// (ResidualScale::ClippedSecondMoment). Bins are equal slices of the period, in
// event time.
//
// Two levels (fold_bins > 0): the period is a whole number of repeats of a
// shorter season (a week of days), and each bin is shrunk toward its phase in
// that shorter season, pooled over all repeats, instead of toward zero and the
// whole series:
//
//   mean_b  = n_b / (n_b + n0) * m_b + n0 / (n_b + n0) * mean_j     (j = b mod fold_bins)
//   mean_j  = N_j / (N_j + n0) * M_j                                (M_j, N_j over the
//   repeats) k_b = (n_b s2_b + n0 k_j) / (n_b + n0),  k_j likewise toward 1
//
// So a shape shared by every day is learned from every day, while what sets one
// day of the week apart (a Sunday with no orders, say: the smooth day and week
// terms of the forecaster, being additive, cannot turn the daily pattern off for
// one day) is learned as the weekly bins fill. Not thread-safe; owned by one shard.
#pragma once

#include <vector>

#include "detectors/event_time.h"
#include "detectors/snapshot.h"

namespace plumbline {

class ResidualProfile {
 public:
  static constexpr double kPrior = 10.0;  // readings of shrinkage toward the whole series
  static constexpr int kWindow = 200;     // readings per bin in the running means

  // period > 0, bins >= 1. One bin is a plain (phase-free) robust scale.
  // fold_bins: 0, or the bins of the shorter season (must divide bins; else 0).
  ResidualProfile(EventTime period, int bins, double clip, int fold_bins = 0);

  int Bin(EventTime t) const;
  // The expected residual and its spread at the phase of t. `sigma_all` is the
  // whole-series scale the bins are shrunk toward.
  double Mean(int bin) const;
  double Sigma(int bin, double sigma_all) const;
  // Folds in residual r and innovation a observed in `bin`, given the current
  // whole-series scale.
  void Update(int bin, double r, double a, double sigma_all);
  // Forgets everything learned (a planned change).
  void Reset();
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);
  int bins() const { return static_cast<int>(bins_.size()); }
  int fold_bins() const { return static_cast<int>(folded_.size()); }
  EventTime period() const { return period_; }

 private:
  struct Bin_ {
    double n = 0, mean = 0, s2 = 0;
  };
  EventTime period_;
  double clip_;
  double correction_;
  std::vector<Bin_> bins_;
  std::vector<Bin_> folded_;  // the shorter season's phases; empty for one level
  // The prior each bin is shrunk toward: its phase's pooled values, or (one
  // level) zero mean and the whole series' spread.
  double PriorMean(int bin) const;
  // Variance ratios to the whole-series scale: the bin's (shrunk) and its prior.
  double Ratio(int bin) const;
  double PriorRatio(int bin) const;
  // q = a / sigma_all; sigma and ratio: the bin's current spread, in units and as a ratio.
  static void Fold(Bin_* b, double r, double q, double sigma, double ratio, double clip,
                   double correction, double window);
};

}  // namespace plumbline
