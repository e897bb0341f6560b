#include "detectors/residual_profile.h"

#include <algorithm>
#include <cmath>

#include "detectors/residual_scale.h"

namespace plumbline {

ResidualProfile::ResidualProfile(EventTime period, int bins, double clip)
    : period_(period),
      clip_(clip),
      correction_(1.0 / ResidualScale::ClippedSecondMoment(clip)),
      bins_(static_cast<size_t>(std::max(bins, 1))) {}

int ResidualProfile::Bin(EventTime t) const {
  EventTime within = t % period_;
  if (within < 0) within += period_;
  const int n = bins();
  return std::min(n - 1, static_cast<int>(static_cast<double>(within) /
                                          static_cast<double>(period_) * n));
}

double ResidualProfile::Mean(int bin) const {
  const Bin_& b = bins_[static_cast<size_t>(bin)];
  return b.n / (b.n + kPrior) * b.mean;
}

double ResidualProfile::Sigma(int bin, double sigma_all) const {
  const Bin_& b = bins_[static_cast<size_t>(bin)];
  return std::sqrt((b.n * b.s2 + kPrior * sigma_all * sigma_all) / (b.n + kPrior));
}

void ResidualProfile::Update(int bin, double r, double a, double sigma_all) {
  if (!std::isfinite(r) || !std::isfinite(a) || !(sigma_all > 0)) return;
  const double sigma = Sigma(bin, sigma_all);
  Bin_& b = bins_[static_cast<size_t>(bin)];
  b.n += 1;
  const double weight = 1.0 / std::min(b.n, static_cast<double>(kWindow));
  const double limit = 4.0 * sigma;
  b.mean += (std::clamp(r, b.mean - limit, b.mean + limit) - b.mean) * weight;
  const double clipped = std::min(a * a, clip_ * clip_ * sigma * sigma) * correction_;
  if (b.n == 1) {
    b.s2 = clipped;
  } else {
    b.s2 += (clipped - b.s2) * weight;
  }
}

}  // namespace plumbline
