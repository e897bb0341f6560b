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
// The shrinkage is empirical Bayes (partial pooling; Efron and Morris 1975,
// with the moment estimator of the between-bin spread of DerSimonian and
// Laird 1986, both from memory). Bin b's running mean m_b (in units of
// sigma_all) and variance ratio s2_b are noisy estimates of its true values,
// with sampling variances
//
//   V(m_b)  ~ k0_b / e_b,      V(s2_b) ~ kappa k0_b^2 / e_b
//
// where k0_b is the ratio b is shrunk toward, e_b its effective count (n_b,
// or 2 window - 1 once the running means forget) and kappa = E[x^2] / E[x]^2 - 1
// over the clipped squared readings x, each divided by its phase's ratio (2 in
// normal theory, which is used until 50 readings are in; heavy tails and small
// counts make it larger). The true values scatter around
// their priors with between-bin variances tau_m^2 and tau_k^2, estimated by
// moments over the bins that have data:
//
//   tau^2 = max(0, mean_b (estimate_b - prior_b)^2 - mean_b V_b)
//
// and each bin moves from its prior toward its own estimate by the weight
// tau^2 / (tau^2 + V_b), but ends no further from its own estimate than one
// standard error (the limited translation of Efron and Morris 1972, from memory;
// with a single tau^2 for all bins, one sharply different bin among many alike
// would otherwise be pooled away):
//
//   mean_b = clamp(m0_b + w_b (m_b - m0_b), m_b -+ sqrt V(m_b))
//   k_b    = clamp(k0_b + w'_b (s2_b - k0_b), s2_b -+ sqrt V(s2_b)),
//   sigma_b = sigma_all sqrt(k_b)
//
// A level with fewer than kMinPooledBins bins holding kMinPooledReadings or
// more cannot tell tau^2 from noise (moment estimates from a handful of bins
// swing widely: three four-month bins of a monthly series, say; and a variance
// from fewer than five readings is too skewed for the sampling variance above):
// there, and for a bin with fewer readings, each bin keeps the fixed weight
// e_b / (e_b + kPrior) toward its prior (common practice, no source).
//
// So a series whose phases all behave alike (tau near 0) keeps every bin at
// the pooled value however few readings each has, and one whose phases differ
// widely (hourly orders: none at night, dozens by day) lets each bin speak for
// itself once it has five readings. A phase whose residuals never vary (a count
// that is zero every night) gets a spread near zero, so the caller floors
// sigma_b at the series' resolution. m(c) is the clipped second moment of
// N(0,1) (ResidualScale::ClippedSecondMoment). Bins are equal slices of the
// period, in event time.
//
// Two levels (fold_bins > 0): the period is a whole number of repeats of a
// shorter season (a week of days), and each bin is shrunk toward its phase in
// that shorter season, pooled over all repeats, instead of toward zero and the
// whole series:
//
//   prior of bin b:  its phase j = b mod fold_bins, with (mean_j, k_j)
//   prior of phase j: mean 0, ratio 1
//
// each level with its own tau_m^2 and tau_k^2.
//
// The phase bins may be narrower than the long ones: each long bin b then
// spans S phase bins J(b) (a week of 5-minute readings: hour-wide long bins,
// half-hour phases, S = 2), its prior is their average, and a reading at
// long bin b and phase j expects
//
//   mean  = m~_b + mean_j - avg_{i in J(b)} mean_i
//   ratio = k~_b * k_j / avg_{i in J(b)} k_i
//
// with m~_b and k~_b the long bin's shrunk values: the day's sharp shape from
// the phases, each hour of the week's departure from it from the long bin. With
// S = 1 this is the rule above. Bin(t) returns a key holding both indices.
//
// Counts (UpdateCount, CountRatio): a store shut on Sundays has no orders at
// any hour of them, a departure that is a multiple of the day's shape (zero
// times it), not an amount added to each hour. Each long bin b also keeps the
// counts it saw, O_b, and what the forecaster and the phase bins alone expected
// there, E_b (exponentially weighted sums, forgetting over kWindow readings),
// and its expected count is the phases' times a ratio shrunk by empirical Bayes
// toward the series' overall ratio (the global moment estimator for
// observed/expected ratios of Marshall 1991, Applied Statistics 40:283-294, as
// used for small-area disease rates; from memory):
//
//   m = sum O / sum E,   s^2 = sum E_b (O_b / E_b - m)^2 / sum E,
//   A = max(0, s^2 - m / mean_b E_b),
//   ratio_b = m + A / (A + m / E_b) (O_b / E_b - m)
//
// A is the spread of the true ratios between bins beyond the Poisson noise
// of each bin's own ratio (m / E_b). A week of a shop shut on its seventh day,
// twelve orders expected and none seen in each of its two open-hours bins,
// halves their expected counts, and four weeks take them to an eighth (worked
// in residual_profile_test), where an additive departure from four readings a
// week is pooled back toward the other days' for much longer. Only the count
// CUSUM reads the ratios (SeriesMonitor); the additive bins still serve the
// other detectors.
//
// So a shape shared by every day is learned from every day, while what sets one
// day of the week apart (a Sunday with no orders, say: the smooth day and week
// terms of the forecaster, being additive, cannot turn the daily pattern off for
// one day) is learned as the weekly bins fill. Not thread-safe; owned by one shard.
#pragma once

#include <cstdint>
#include <optional>
#include <vector>

#include "detectors/event_time.h"
#include "detectors/snapshot.h"

namespace plumbline {

class ResidualProfile {
 public:
  static constexpr double kWindow = 200;  // readings per bin in the running means
  // Standard errors a bin's estimate may be moved toward its prior (below).
  static constexpr double kTranslationLimit = 1.0;
  // Bins with data a level needs before its tau^2 is estimated, and the fixed
  // prior weight (readings) used until then.
  static constexpr int kMinPooledBins = 10;
  static constexpr double kMinPooledReadings = 5;  // a bin's, to take part
  static constexpr double kPrior = 10.0;

  // period > 0, bins >= 1. One bin is a plain (phase-free) robust scale.
  // fold_bins: 0, or the bins of the shorter season, fold_period, which must
  // divide period a whole number of times; the long bins within one repeat
  // must divide fold_bins (each long bin spans fold_bins / (bins / repeats)
  // phase bins). fold_period 0: phase bins as wide as the long ones (then
  // fold_bins must divide bins). Otherwise one level.
  ResidualProfile(EventTime period, int bins, double clip, int fold_bins = 0,
                  EventTime fold_period = 0);

  // The key of t's bins (its long bin and, with two levels, its phase bin).
  int Bin(EventTime t) const;
  // Starts loading the bins a reading at key `key` touches into the caches.
  void Prefetch(int key) const;
  // The expected residual and its spread at the bins of `key`. `sigma_all` is
  // the whole-series scale the bins are shrunk toward.
  double Mean(int key, double sigma_all) const;
  double Sigma(int key, double sigma_all) const;
  // Both at once, each phase bin's shrunk values worked out once (Mean and
  // Sigma are its two halves).
  struct Expectation {
    double mean;
    double sigma;
  };
  Expectation MeanAndSigma(int key, double sigma_all) const;
  // Folds in residual r and innovation a observed at `key`, given the current
  // whole-series scale, and every kPoolEvery readings estimates the between-bin
  // spreads again. With long_bins false (two levels only) the long bins learn
  // nothing from it, the phase bins do: the caller's forecaster has not yet
  // seen a whole long period, so its residuals say nothing settled about one
  // day of the week (SeriesMonitor).
  void Update(int key, double r, double a, double sigma_all, bool long_bins = true);
  // The phase bins' expected residual at `key`, without its long bin's
  // departure (two levels; zero with one).
  double PhaseMean(int key, double sigma_all) const;
  // Counts (two levels only; a no-op with one): folds in a count and what the
  // forecaster and phase bins alone expected of it (>= 0) at `key`'s long bin.
  void UpdateCount(int key, double count, double expected);
  // The long bin's shrunk ratio of counts to that expectation, once kMinPooledBins
  // bins have expected at least one count; before, none.
  std::optional<double> CountRatio(int key) const;
  // Forgets everything learned (a planned change).
  void Reset();
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);
  int bins() const { return static_cast<int>(bins_.size()); }
  int fold_bins() const { return static_cast<int>(folded_.size()); }
  EventTime period() const { return period_; }
  EventTime fold_period() const { return fold_period_; }

 private:
  // Single precision: a bin's running mean and second moment are estimates
  // with sampling errors of percents, and floats halve the profile (a week of
  // hour-wide bins plus a day's phases: 5.2 -> 2.6 KB a series). Its count is
  // exact to 2^24 readings a bin.
  struct Bin_ {
    float n = 0, mean = 0, s2 = 0;
  };
  // One level's between-bin variances: of the means (in units of sigma_all^2)
  // and of the variance ratios, around their priors.
  struct Spread {
    double mean = 0, ratio = 0;
    bool estimated = false;  // else too few bins had data: the fixed prior weight applies
  };
  EventTime period_;
  // Two levels: the shorter season, long bins per repeat of it, and phase
  // bins per long bin (1 when they are as wide).
  EventTime fold_period_ = 0;
  int per_repeat_ = 0;
  int span_ = 1;
  bool SetFold(int fold_bins, EventTime fold_period);
  size_t LongBin(int key) const {
    return static_cast<size_t>(folded_.empty() ? key : key / fold_bins());
  }
  size_t Phase(int key) const { return static_cast<size_t>(key % fold_bins()); }
  double clip_;
  double correction_;
  std::vector<Bin_> bins_;
  std::vector<Bin_> folded_;  // the shorter season's phases; empty for one level
  Spread spread_, folded_spread_;
  // Counts seen and expected at each long bin (empty until UpdateCount), and
  // the pooled ratio m and between-bin spread A (header comment).
  struct Rate {
    double observed = 0, expected = 0;
  };
  std::vector<Rate> rates_;
  struct RatePool {
    double ratio = 1, spread = 0;
    bool estimated = false;
  };
  RatePool rate_pool_;
  std::uint32_t since_rate_pool_ = 0;
  void PoolRates();
  // Running moments of the squared standardised readings over their phase's
  // variance ratio: m2 / m1^2 - 1 is the sampling factor of s2.
  struct Moments {
    double n = 0, m1 = 0, m2 = 0;
  };
  Moments kurtosis_;
  static constexpr double kKurtosisWindow = 2000;
  static constexpr double kMinKurtosisRatio = 1e-6;
  double RatioSamplingFactor() const;
  static constexpr std::uint32_t kPoolEvery = 16;  // readings between estimates of the spreads
  std::uint32_t since_pool_ = 0;
  double FoldedWindow() const;
  // Weight of a bin's own estimate against its prior.
  static double Weight(double tau2, double sampling_variance);
  // The pooled estimate, held within kTranslationLimit standard errors of the bin's own.
  // Without a pooled estimate of tau^2, a bin with e readings gets e / (e + kPrior).
  static double Shrink(double estimate, double prior, double tau2, bool pooled,
                       double sampling_variance, double effective);
  double FoldedMean(size_t j, double sigma_all) const;
  double FoldedRatio(size_t j) const;
  // tau^2 of one level by moments; prior(b) gives each bin's (mean, ratio) prior.
  template <typename Prior>
  static Spread Between(const std::vector<Bin_>& bins, double window, double sigma_all,
                        double ratio_factor, Prior prior);
  // The prior each long bin b is shrunk toward: the average of its phases'
  // pooled values, or (one level) zero mean and the whole series' spread.
  double PriorMean(size_t b, double sigma_all) const;
  double PriorRatio(size_t b) const;
  // Long bin b's shrunk mean and variance ratio to the whole-series scale,
  // given its priors.
  double LongMean(size_t b, double sigma_all, double prior, double prior_ratio) const;
  double LongRatio(size_t b, double prior) const;
  // Averages value(j) over the phase bins long bin b spans (two levels only).
  template <typename Value>
  double PhaseAverage(size_t b, Value value) const;
  static constexpr size_t kMaxCachedPriors = 64;  // long-bin priors kept while pooling
  // The variance ratio at a key: its long bin's, shaped by its phase's.
  double Ratio(int key) const;
  // A long bin's ratio shaped by one of its phases: times the phase's ratio
  // over the average of the long bin's phases (with two levels and S > 1).
  double PhaseShaped(double long_ratio, double prior_ratio, double phase_ratio) const;
  // q = a / sigma_all; sigma and ratio: the bin's current spread, in units and
  // as a ratio; r is clipped within 4 sigma of center.
  static void Fold(Bin_* b, double r, double center, double q, double sigma, double ratio,
                   double clip, double correction, double window);
};

}  // namespace plumbline
