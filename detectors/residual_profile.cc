#include "detectors/residual_profile.h"

#include <algorithm>
#include <array>
#include <cmath>
#include <limits>
#include <utility>

#include "detectors/prefetch.h"
#include "detectors/residual_scale.h"

namespace plumbline {

ResidualProfile::ResidualProfile(EventTime period, int bins, double clip, int fold_bins,
                                 EventTime fold_period)
    : period_(period),
      clip_(clip),
      correction_(1.0 / ResidualScale::ClippedSecondMoment(clip)),
      bins_(static_cast<size_t>(std::max(bins, 1))) {
  if (fold_period == 0 && fold_bins > 0 && fold_bins < this->bins() &&
      this->bins() % fold_bins == 0) {
    // Phase bins as wide as the long ones.
    fold_period = period / (this->bins() / fold_bins);
  }
  (void)SetFold(fold_bins, fold_period);
}

bool ResidualProfile::SetFold(int fold_bins, EventTime fold_period) {
  folded_.clear();
  fold_period_ = 0;
  per_repeat_ = 0;
  span_ = 1;
  if (fold_bins <= 0 || fold_period <= 0 || fold_period >= period_ ||
      period_ % fold_period != 0) {
    return false;
  }
  const EventTime repeats = period_ / fold_period;
  const int n = bins();
  if (n % repeats != 0) return false;
  const int per_repeat = static_cast<int>(n / repeats);
  if (fold_bins % per_repeat != 0) return false;
  folded_.resize(static_cast<size_t>(fold_bins));
  fold_period_ = fold_period;
  per_repeat_ = per_repeat;
  span_ = fold_bins / per_repeat;
  return true;
}

void ResidualProfile::Reset() {
  std::fill(bins_.begin(), bins_.end(), Bin_{});
  std::fill(folded_.begin(), folded_.end(), Bin_{});
  spread_ = folded_spread_ = Spread{};
  kurtosis_ = Moments{};
  since_pool_ = 0;
  std::vector<Rate>().swap(rates_);
  rate_pool_ = RatePool{};
  since_rate_pool_ = 0;
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
  // Readings a phase bin gets for each one a long bin gets.
  return kWindow * static_cast<double>(bins_.size()) /
         static_cast<double>(std::max<size_t>(folded_.size(), 1));
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

template <typename Value>
double ResidualProfile::PhaseAverage(size_t b, Value value) const {
  const size_t first =
      (b % static_cast<size_t>(per_repeat_)) * static_cast<size_t>(span_);
  double sum = 0;
  for (int i = 0; i < span_; ++i) sum += value(first + static_cast<size_t>(i));
  return sum / span_;
}

double ResidualProfile::PriorMean(size_t b, double sigma_all) const {
  if (folded_.empty()) return 0.0;
  return PhaseAverage(b, [&](size_t j) { return FoldedMean(j, sigma_all); });
}

double ResidualProfile::PriorRatio(size_t b) const {
  if (folded_.empty()) return 1.0;
  return PhaseAverage(b, [&](size_t j) { return FoldedRatio(j); });
}

int ResidualProfile::Bin(EventTime t) const {
  const auto slot = [t](EventTime period, int n) {
    EventTime within = t % period;
    if (within < 0) within += period;
    return std::min(n - 1, static_cast<int>(static_cast<double>(within) /
                                            static_cast<double>(period) * n));
  };
  const int b = slot(period_, bins());
  if (folded_.empty()) return b;
  return b * fold_bins() + slot(fold_period_, fold_bins());
}

void ResidualProfile::Prefetch(int key) const {
  const size_t b = LongBin(key);
  if (b < bins_.size()) __builtin_prefetch(&bins_[b]);
  if (!folded_.empty()) {
    const size_t first = (b % static_cast<size_t>(per_repeat_)) * static_cast<size_t>(span_);
    PrefetchRange(&folded_[first], sizeof(Bin_) * static_cast<size_t>(span_));
  }
}

double ResidualProfile::LongMean(size_t b, double sigma_all, double prior,
                                 double prior_ratio) const {
  const Bin_& x = bins_[b];
  if (x.n == 0) return prior;
  const double e = Effective(x.n, kWindow);
  if (!(sigma_all > 0)) return prior + e / (e + kPrior) * (x.mean - prior);
  return sigma_all * Shrink(x.mean / sigma_all, prior / sigma_all, spread_.mean,
                            spread_.estimated, prior_ratio / e, e);
}

double ResidualProfile::Mean(int key, double sigma_all) const {
  return MeanAndSigma(key, sigma_all).mean;
}

double ResidualProfile::PhaseMean(int key, double sigma_all) const {
  return folded_.empty() ? 0.0 : FoldedMean(Phase(key), sigma_all);
}

void ResidualProfile::UpdateCount(int key, double count, double expected) {
  if (folded_.empty() || !std::isfinite(count) || !std::isfinite(expected)) return;
  if (rates_.empty()) rates_.resize(bins_.size());
  Rate& rate = rates_[LongBin(key)];
  constexpr double kKeep = 1.0 - 1.0 / kWindow;
  rate.observed = kKeep * rate.observed + std::max(count, 0.0);
  rate.expected = kKeep * rate.expected + std::max(expected, 0.0);
  if (++since_rate_pool_ < kPoolEvery) return;
  since_rate_pool_ = 0;
  PoolRates();
}

void ResidualProfile::PoolRates() {
  double observed = 0, expected = 0;
  int bins = 0;
  for (const Rate& rate : rates_) {
    observed += rate.observed;
    expected += rate.expected;
    bins += rate.expected >= 1.0;
  }
  rate_pool_.estimated = bins >= kMinPooledBins && expected > 0;
  if (!rate_pool_.estimated) return;
  const double m = observed / expected;
  double s2 = 0;
  int weighted = 0;
  for (const Rate& rate : rates_) {
    if (!(rate.expected > 0)) continue;
    const double d = rate.observed / rate.expected - m;
    s2 += rate.expected * d * d;
    ++weighted;
  }
  s2 /= expected;
  rate_pool_.ratio = m;
  rate_pool_.spread = std::max(0.0, s2 - m / (expected / weighted));
}

std::optional<double> ResidualProfile::CountRatio(int key) const {
  if (!rate_pool_.estimated) return std::nullopt;
  const Rate& rate = rates_[LongBin(key)];
  const double m = rate_pool_.ratio, a = rate_pool_.spread;
  if (!(rate.expected > 0) || !(a > 0)) return m;
  return m + a / (a + m / rate.expected) * (rate.observed / rate.expected - m);
}

double ResidualProfile::LongRatio(size_t b, double prior) const {
  const Bin_& x = bins_[b];
  if (x.n == 0) return prior;
  const double e = Effective(x.n, kWindow);
  return std::max(0.0, Shrink(x.s2, prior, spread_.ratio, spread_.estimated,
                              RatioSamplingFactor() * prior * prior / e, e));
}

double ResidualProfile::PhaseShaped(double long_ratio, double prior_ratio,
                                    double phase_ratio) const {
  if (span_ == 1) return long_ratio;
  return prior_ratio > kMinKurtosisRatio ? long_ratio * phase_ratio / prior_ratio
                                         : long_ratio;
}

double ResidualProfile::Ratio(int key) const {
  const size_t b = LongBin(key);
  const double prior = PriorRatio(b);
  const double ratio = LongRatio(b, prior);
  if (span_ == 1) return ratio;
  return PhaseShaped(ratio, prior, FoldedRatio(Phase(key)));
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

double ResidualProfile::Sigma(int key, double sigma_all) const {
  return MeanAndSigma(key, sigma_all).sigma;
}

ResidualProfile::Expectation ResidualProfile::MeanAndSigma(int key,
                                                           double sigma_all) const {
  const size_t b = LongBin(key);
  // Mean and Ratio, sharing PriorMean's and PriorRatio's phase values (summed
  // in the same order) and this phase's own.
  double prior_mean = 0.0, prior_ratio = 1.0, phase_mean = 0.0, phase_ratio = 1.0;
  if (!folded_.empty()) {
    const size_t first =
        (b % static_cast<size_t>(per_repeat_)) * static_cast<size_t>(span_);
    const size_t j = Phase(key);
    bool spanned = false;
    double mean_sum = 0, ratio_sum = 0;
    for (int i = 0; i < span_; ++i) {
      const size_t p = first + static_cast<size_t>(i);
      const double m = FoldedMean(p, sigma_all), r = FoldedRatio(p);
      if (p == j) {
        phase_mean = m;
        phase_ratio = r;
        spanned = true;
      }
      mean_sum += m;
      ratio_sum += r;
    }
    prior_mean = mean_sum / span_;
    prior_ratio = ratio_sum / span_;
    if (!spanned && span_ != 1) {
      phase_mean = FoldedMean(j, sigma_all);
      phase_ratio = FoldedRatio(j);
    }
  }
  double mean = LongMean(b, sigma_all, prior_mean, prior_ratio);
  // A long bin's value is the average over its phases: this phase's own
  // departure from that average is added back.
  if (span_ != 1) mean = mean + phase_mean - prior_mean;
  const double ratio = PhaseShaped(LongRatio(b, prior_ratio), prior_ratio, phase_ratio);
  return {mean, sigma_all * std::sqrt(ratio)};
}

void ResidualProfile::Fold(Bin_* b, double r, double center, double q, double sigma,
                           double ratio, double clip, double correction, double window) {
  b->n += 1;
  const double weight = 1.0 / std::min(static_cast<double>(b->n), window);
  const double limit = 4.0 * sigma;
  const double mean = b->mean;
  b->mean = static_cast<float>(
      mean + (std::clamp(r, center - limit, center + limit) - mean) * weight);
  const double clipped = std::min(q * q, clip * clip * ratio) * correction;
  if (b->n == 1) {
    b->s2 = static_cast<float>(clipped);
  } else {
    const double s2 = b->s2;
    b->s2 = static_cast<float>(s2 + (clipped - s2) * weight);
  }
}

void ResidualProfile::Update(int key, double r, double a, double sigma_all, bool long_bins) {
  if (!std::isfinite(r) || !std::isfinite(a) || !(sigma_all > 0)) return;
  const double q = a / sigma_all;
  const size_t b = LongBin(key);
  // Where a long bin spans several phases, r is held near this phase's share
  // of the long bin's mean.
  double center = bins_[b].mean;
  if (!folded_.empty()) {
    // The pooled phase sees every repeat, so its window spans as many periods.
    const size_t j = Phase(key);
    const double ratio = FoldedRatio(j);
    if (span_ > 1) center += FoldedMean(j, sigma_all) - PriorMean(b, sigma_all);
    Fold(&folded_[j], r, folded_[j].mean, q, sigma_all * std::sqrt(ratio), ratio, clip_,
         correction_, FoldedWindow());
  }
  const double ratio = Ratio(key);
  if (long_bins || folded_.empty()) {
    Fold(&bins_[b], r, center, q, sigma_all * std::sqrt(ratio), ratio, clip_, correction_,
         kWindow);
  }
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
  const auto neutral = [](size_t) { return std::pair{0.0, 1.0}; };  // zero mean, ratio 1
  if (folded_.empty()) {
    spread_ = Between(bins_, kWindow, sigma_all, RatioSamplingFactor(), neutral);
    return;
  }
  folded_spread_ =
      Between(folded_, FoldedWindow(), sigma_all, RatioSamplingFactor(), neutral);
  // A long bin's prior depends on its position within a repeat alone: worked
  // out once for each position, not once for every long bin.
  std::array<std::pair<double, double>, kMaxCachedPriors> priors;
  const size_t cached = std::min(static_cast<size_t>(per_repeat_), priors.size());
  for (size_t p = 0; p < cached; ++p) {
    priors[p] = {PriorMean(p, sigma_all), PriorRatio(p)};
  }
  spread_ = Between(bins_, kWindow, sigma_all, RatioSamplingFactor(),
                    [&](size_t b) -> std::pair<double, double> {
                      const size_t p = b % static_cast<size_t>(per_repeat_);
                      if (p < cached) return priors[p];
                      return {PriorMean(b, sigma_all), PriorRatio(b)};
                    });
}

void ResidualProfile::Save(SnapshotWriter& w) const {
  w.Tag("PRF4");
  w.I64(fold_period_);
  w.U64(folded_.size());
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
  w.U64(rates_.size());
  for (const Rate& rate : rates_) {
    w.F64(rate.observed);
    w.F64(rate.expected);
  }
  w.Bool(rate_pool_.estimated);
  w.F64(rate_pool_.ratio);
  w.F64(rate_pool_.spread);
  w.U32(since_rate_pool_);
}

Status ResidualProfile::Load(SnapshotReader& r) {
  // "PRF4" adds the counts' ratios (before, they start empty); "PRF3" records
  // the phase bins' own season; "PRF2", the layout before that,
  // had phase bins as wide as the long ones (the geometry made by the
  // constructor); "PROF", before the between-bin spreads were kept: they
  // start unestimated (the fixed prior weight) and are estimated again at the
  // next reading.
  const bool rates = r.NextTagIs("PRF4");
  const bool geometry = rates || r.NextTagIs("PRF3");
  const bool spreads = geometry || r.NextTagIs("PRF2");
  r.Tag(rates ? "PRF4" : geometry ? "PRF3" : spreads ? "PRF2" : "PROF");
  if (geometry) {
    const EventTime fold_period = r.Time("phase profile season");
    const std::uint64_t fold_bins = r.Count(24);
    if (!r.ok()) return r.status();
    const bool valid =
        fold_bins == 0
            ? fold_period == 0
            : fold_bins <= static_cast<std::uint64_t>(std::numeric_limits<int>::max()) &&
                  SetFold(static_cast<int>(fold_bins), fold_period);
    if (!valid) return r.Fail("phase profile season out of range");
    if (fold_bins == 0) (void)SetFold(0, 0);
  }
  for (std::vector<Bin_>* bins : {&bins_, &folded_}) {
    if (r.Count(24) != bins->size()) return r.Fail("phase profile bins differ");
    for (Bin_& b : *bins) {
      // Bins are single precision: a value beyond it is refused, not made
      // infinite (which would save a state that cannot be loaded).
      const double n = r.NonNegative("phase profile bin count");
      const double mean = r.Finite("phase profile bin mean");
      const double s2 = r.NonNegative("phase profile bin variance ratio");
      constexpr double kLargest = std::numeric_limits<float>::max();
      if (r.ok() && (n > kLargest || std::abs(mean) > kLargest || s2 > kLargest)) {
        return r.Fail("phase profile bin out of single-precision range");
      }
      b.n = static_cast<float>(n);
      b.mean = static_cast<float>(mean);
      b.s2 = static_cast<float>(s2);
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
    if (r.ok() && since_pool_ >= kPoolEvery)
      return r.Fail("phase profile pool count out of range");
  }
  std::vector<Rate>().swap(rates_);
  rate_pool_ = RatePool{};
  since_rate_pool_ = 0;
  if (rates) {
    const std::uint64_t n = r.Count(16);
    if (r.ok() && n != 0 && (folded_.empty() || n != bins_.size()))
      return r.Fail("phase profile count bins differ");
    rates_.resize(static_cast<size_t>(r.ok() ? n : 0));
    for (Rate& rate : rates_) {
      rate.observed = r.NonNegative("phase profile counts seen");
      rate.expected = r.NonNegative("phase profile counts expected");
    }
    rate_pool_.estimated = r.Bool();
    rate_pool_.ratio = r.NonNegative("phase profile count ratio");
    rate_pool_.spread = r.NonNegative("phase profile count ratio spread");
    since_rate_pool_ = r.U32();
    if (r.ok() && since_rate_pool_ >= kPoolEvery)
      return r.Fail("phase profile count pool out of range");
    if (r.ok() && rate_pool_.estimated && rates_.empty())
      return r.Fail("phase profile count ratios without counts");
  }
  return r.status();
}

}  // namespace plumbline
