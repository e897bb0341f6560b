#include "detectors/residual_profile.h"

#include <algorithm>
#include <cmath>
#include <utility>

#include "detectors/residual_scale.h"

namespace plumbline {

ResidualProfile::ResidualProfile(EventTime period, int bins, double clip, int fold_bins)
    : period_(period),
      clip_(clip),
      correction_(1.0 / ResidualScale::ClippedSecondMoment(clip)),
      bins_(static_cast<size_t>(std::max(bins, 1))) {
  if (fold_bins > 0 && fold_bins < this->bins() && this->bins() % fold_bins == 0) {
    folded_.resize(static_cast<size_t>(fold_bins));
  }
}

void ResidualProfile::Reset() {
  std::fill(bins_.begin(), bins_.end(), Bin_{});
  std::fill(folded_.begin(), folded_.end(), Bin_{});
  spread_ = folded_spread_ = Spread{};
  kurtosis_ = Moments{};
  since_pool_ = 0;
}

namespace {

// A running mean over min(n, window) readings: n readings while it fills, then
// an exponential average worth 2 window - 1.
double Effective(double n, double window) { return n <= window ? n : 2.0 * window - 1.0; }

// V(s2) / k^2 for normal readings (normal theory; see the header), used until
// kMinKurtosisReadings have been seen.
constexpr double kNormalRatioSamplingFactor = 2.0;
constexpr double kMinKurtosisReadings = 50;

}  // namespace

double ResidualProfile::Weight(double tau2, double sampling_variance) {
  return tau2 > 0 ? tau2 / (tau2 + sampling_variance) : 0.0;
}

double ResidualProfile::RatioSamplingFactor() const {
  if (kurtosis_.n < kMinKurtosisReadings || !(kurtosis_.m1 > 0)) {
    return kNormalRatioSamplingFactor;
  }
  return std::max(kurtosis_.m2 / (kurtosis_.m1 * kurtosis_.m1) - 1.0, 0.5);
}

double ResidualProfile::FoldedWindow() const {
  return kWindow * static_cast<double>(bins_.size() / std::max<size_t>(folded_.size(), 1));
}

double ResidualProfile::Shrink(double estimate, double prior, double tau2, bool pooled,
                               double sampling_variance, double effective) {
  if (!pooled || effective < kMinPooledReadings) {
    return prior + effective / (effective + kPrior) * (estimate - prior);
  }
  const double shrunk = prior + Weight(tau2, sampling_variance) * (estimate - prior);
  const double reach = kTranslationLimit * std::sqrt(sampling_variance);
  return std::clamp(shrunk, estimate - reach, estimate + reach);
}

double ResidualProfile::FoldedRatio(size_t j) const {
  const Bin_& f = folded_[j];
  if (f.n == 0) return 1.0;
  const double e = Effective(f.n, FoldedWindow());
  return std::max(0.0, Shrink(f.s2, 1.0, folded_spread_.ratio, folded_spread_.estimated,
                              RatioSamplingFactor() / e, e));
}

double ResidualProfile::FoldedMean(size_t j, double sigma_all) const {
  const Bin_& f = folded_[j];
  if (f.n == 0) return 0.0;
  const double e = Effective(f.n, FoldedWindow());
  if (!(sigma_all > 0)) return e / (e + kPrior) * f.mean;
  return sigma_all * Shrink(f.mean / sigma_all, 0.0, folded_spread_.mean,
                            folded_spread_.estimated, 1.0 / e, e);
}

double ResidualProfile::PriorMean(int bin, double sigma_all) const {
  if (folded_.empty()) return 0.0;
  return FoldedMean(static_cast<size_t>(bin) % folded_.size(), sigma_all);
}

double ResidualProfile::PriorRatio(int bin) const {
  if (folded_.empty()) return 1.0;
  return FoldedRatio(static_cast<size_t>(bin) % folded_.size());
}

int ResidualProfile::Bin(EventTime t) const {
  EventTime within = t % period_;
  if (within < 0) within += period_;
  const int n = bins();
  return std::min(n - 1, static_cast<int>(static_cast<double>(within) /
                                          static_cast<double>(period_) * n));
}

double ResidualProfile::Mean(int bin, double sigma_all) const {
  const double prior = PriorMean(bin, sigma_all);
  const Bin_& b = bins_[static_cast<size_t>(bin)];
  if (b.n == 0) return prior;
  const double e = Effective(b.n, kWindow);
  if (!(sigma_all > 0)) return prior + e / (e + kPrior) * (b.mean - prior);
  return sigma_all *
         Shrink(b.mean / sigma_all, prior / sigma_all, spread_.mean, spread_.estimated,
                PriorRatio(bin) / e, e);
}

double ResidualProfile::Ratio(int bin) const {
  const double prior = PriorRatio(bin);
  const Bin_& b = bins_[static_cast<size_t>(bin)];
  if (b.n == 0) return prior;
  const double e = Effective(b.n, kWindow);
  return std::max(0.0,
                  Shrink(b.s2, prior, spread_.ratio, spread_.estimated,
                         RatioSamplingFactor() * prior * prior / e, e));
}

template <typename Prior>
ResidualProfile::Spread ResidualProfile::Between(const std::vector<Bin_>& bins, double window,
                                                 double sigma_all, double ratio_factor,
                                                 Prior prior) {
  double mean_deviation = 0, mean_sampling = 0, ratio_deviation = 0, ratio_sampling = 0;
  int filled = 0;
  for (size_t b = 0; b < bins.size(); ++b) {
    const Bin_& x = bins[b];
    if (x.n < kMinPooledReadings) continue;
    const auto [prior_mean, prior_ratio] = prior(b);
    const double e = Effective(x.n, window);
    const double d = (x.mean - prior_mean) / sigma_all;
    mean_deviation += d * d;
    mean_sampling += prior_ratio / e;
    ratio_deviation += (x.s2 - prior_ratio) * (x.s2 - prior_ratio);
    ratio_sampling += ratio_factor * prior_ratio * prior_ratio / e;
    ++filled;
  }
  // Too few bins to tell their spread from noise: the fixed prior weight applies.
  if (filled < kMinPooledBins) return {};
  return {std::max(0.0, (mean_deviation - mean_sampling) / filled),
          std::max(0.0, (ratio_deviation - ratio_sampling) / filled), true};
}

double ResidualProfile::Sigma(int bin, double sigma_all) const {
  return sigma_all * std::sqrt(Ratio(bin));
}

void ResidualProfile::Fold(Bin_* b, double r, double q, double sigma, double ratio,
                           double clip, double correction, double window) {
  b->n += 1;
  const double weight = 1.0 / std::min(b->n, window);
  const double limit = 4.0 * sigma;
  b->mean += (std::clamp(r, b->mean - limit, b->mean + limit) - b->mean) * weight;
  const double clipped = std::min(q * q, clip * clip * ratio) * correction;
  if (b->n == 1) {
    b->s2 = clipped;
  } else {
    b->s2 += (clipped - b->s2) * weight;
  }
}

void ResidualProfile::Update(int bin, double r, double a, double sigma_all) {
  if (!std::isfinite(r) || !std::isfinite(a) || !(sigma_all > 0)) return;
  const double q = a / sigma_all;
  if (!folded_.empty()) {
    // The pooled phase sees every repeat, so its window spans as many periods.
    const size_t j = static_cast<size_t>(bin) % folded_.size();
    const double ratio = PriorRatio(bin);
    Fold(&folded_[j], r, q, sigma_all * std::sqrt(ratio), ratio, clip_, correction_,
         FoldedWindow());
  }
  const double ratio = Ratio(bin);
  Fold(&bins_[static_cast<size_t>(bin)], r, q, sigma_all * std::sqrt(ratio), ratio, clip_,
       correction_, kWindow);
  // The squared readings' spread relative to their phase's variance, for the
  // sampling variance of s2 (heavy tails make it larger than normal theory's).
  if (ratio > kMinKurtosisRatio) {
    const double x = std::min(q * q, clip_ * clip_ * ratio) * correction_ / ratio;
    kurtosis_.n += 1;
    const double weight = 1.0 / std::min(kurtosis_.n, kKurtosisWindow);
    kurtosis_.m1 += (x - kurtosis_.m1) * weight;
    kurtosis_.m2 += (x * x - kurtosis_.m2) * weight;
  }
  // The spreads move slowly; estimating them again costs a pass over the bins,
  // so it is done every kPoolEvery readings, not at each.
  if (++since_pool_ < kPoolEvery) return;
  since_pool_ = 0;
  if (!folded_.empty()) {
    folded_spread_ = Between(folded_, FoldedWindow(), sigma_all, RatioSamplingFactor(),
                             [](size_t) { return std::pair{0.0, 1.0}; });
  }
  spread_ = Between(bins_, kWindow, sigma_all, RatioSamplingFactor(), [this, sigma_all](size_t b) {
    const int bin = static_cast<int>(b);
    return std::pair{PriorMean(bin, sigma_all), PriorRatio(bin)};
  });
}

void ResidualProfile::Save(SnapshotWriter& w) const {
  w.Tag("PRF2");
  for (const std::vector<Bin_>* bins : {&bins_, &folded_}) {
    w.U64(bins->size());
    for (const Bin_& b : *bins) {
      w.F64(b.n);
      w.F64(b.mean);
      w.F64(b.s2);
    }
  }
  for (const Spread* spread : {&spread_, &folded_spread_}) {
    w.Bool(spread->estimated);
    w.F64(spread->mean);
    w.F64(spread->ratio);
  }
  w.F64(kurtosis_.n);
  w.F64(kurtosis_.m1);
  w.F64(kurtosis_.m2);
  w.U32(since_pool_);
}

Status ResidualProfile::Load(SnapshotReader& r) {
  // "PROF", the layout before the between-bin spreads were kept: they start
  // unestimated (the fixed prior weight) and are estimated again at the next reading.
  const bool spreads = r.NextTagIs("PRF2");
  r.Tag(spreads ? "PRF2" : "PROF");
  for (std::vector<Bin_>* bins : {&bins_, &folded_}) {
    if (r.Count(24) != bins->size()) return r.Fail("phase profile bins differ");
    for (Bin_& b : *bins) {
      b.n = r.NonNegative("phase profile bin count");
      b.mean = r.Finite("phase profile bin mean");
      b.s2 = r.NonNegative("phase profile bin variance ratio");
    }
  }
  spread_ = folded_spread_ = Spread{};
  kurtosis_ = Moments{};
  since_pool_ = kPoolEvery - 1;  // the old layout: estimated at the next reading
  if (spreads) {
    for (Spread* spread : {&spread_, &folded_spread_}) {
      spread->estimated = r.Bool();
      spread->mean = r.NonNegative("phase profile spread of means");
      spread->ratio = r.NonNegative("phase profile spread of ratios");
    }
    kurtosis_.n = r.NonNegative("phase profile kurtosis count");
    kurtosis_.m1 = r.NonNegative("phase profile second moment");
    kurtosis_.m2 = r.NonNegative("phase profile fourth moment");
    since_pool_ = r.U32();
    if (r.ok() && since_pool_ >= kPoolEvery) return r.Fail("phase profile pool count out of range");
  }
  return r.status();
}

}  // namespace plumbline
