#include "detectors/residual_profile.h"

#include <algorithm>
#include <cmath>

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
}

double ResidualProfile::PriorMean(int bin) const {
  if (folded_.empty()) return 0.0;
  const Bin_& j = folded_[static_cast<size_t>(bin) % folded_.size()];
  return j.n / (j.n + kPrior) * j.mean;
}

double ResidualProfile::PriorRatio(int bin) const {
  if (folded_.empty()) return 1.0;
  const Bin_& j = folded_[static_cast<size_t>(bin) % folded_.size()];
  return (j.n * j.s2 + kPrior) / (j.n + kPrior);
}

int ResidualProfile::Bin(EventTime t) const {
  EventTime within = t % period_;
  if (within < 0) within += period_;
  const int n = bins();
  return std::min(n - 1, static_cast<int>(static_cast<double>(within) /
                                          static_cast<double>(period_) * n));
}

double ResidualProfile::Mean(int bin) const {
  const Bin_& b = bins_[static_cast<size_t>(bin)];
  return (b.n * b.mean + kPrior * PriorMean(bin)) / (b.n + kPrior);
}

double ResidualProfile::Ratio(int bin) const {
  const Bin_& b = bins_[static_cast<size_t>(bin)];
  return (b.n * b.s2 + kPrior * PriorRatio(bin)) / (b.n + kPrior);
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
    const double repeats = static_cast<double>(bins_.size() / folded_.size());
    const double ratio = PriorRatio(bin);
    Fold(&folded_[j], r, q, sigma_all * std::sqrt(ratio), ratio, clip_, correction_,
         kWindow * repeats);
  }
  const double ratio = Ratio(bin);
  Fold(&bins_[static_cast<size_t>(bin)], r, q, sigma_all * std::sqrt(ratio), ratio, clip_,
       correction_, kWindow);
}

void ResidualProfile::Save(SnapshotWriter& w) const {
  w.Tag("PROF");
  for (const std::vector<Bin_>* bins : {&bins_, &folded_}) {
    w.U64(bins->size());
    for (const Bin_& b : *bins) {
      w.F64(b.n);
      w.F64(b.mean);
      w.F64(b.s2);
    }
  }
}

Status ResidualProfile::Load(SnapshotReader& r) {
  r.Tag("PROF");
  for (std::vector<Bin_>* bins : {&bins_, &folded_}) {
    if (r.Count(24) != bins->size()) return r.Fail("phase profile bins differ");
    for (Bin_& b : *bins) {
      b.n = r.NonNegative("phase profile bin count");
      b.mean = r.Finite("phase profile bin mean");
      b.s2 = r.NonNegative("phase profile bin variance ratio");
    }
  }
  return r.status();
}

}  // namespace plumbline
