#include "detectors/residual_scale.h"

#include <algorithm>
#include <cmath>
#include <numbers>

namespace plumbline {

bool ResidualScaleOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why) *why = message;
    return false;
  };
  if (window < 10 || window > 1000000) return fail("scale window must be in [10, 1000000] readings");
  if (!(clip >= 1.5 && clip <= 10)) return fail("scale clip must be in [1.5, 10]");
  if (!(floor > 0 && std::isfinite(floor))) return fail("scale floor must be finite and > 0");
  return true;
}

double ResidualScale::ClippedSecondMoment(double c) {
  const double phi = std::exp(-0.5 * c * c) / std::sqrt(2.0 * std::numbers::pi);
  const double upper_tail = 0.5 * std::erfc(c / std::numbers::sqrt2);  // 1 - Phi(c)
  return (1.0 - 2.0 * upper_tail) - 2.0 * c * phi + 2.0 * c * c * upper_tail;
}

ResidualScale::ResidualScale(const ResidualScaleOptions& options)
    : options_(options), correction_(1.0 / ClippedSecondMoment(options.clip)) {}

bool ResidualScale::Update(double u) {
  if (!std::isfinite(u)) return false;
  ++count_;
  if (count_ <= kStart) {
    first_[count_ - 1] = std::abs(u);
    const int n = static_cast<int>(count_);
    std::array<double, kStart> sorted{};
    for (int i = 0; i < n; ++i) {  // insertion sort of at most kStart values
      int j = i;
      for (; j > 0 && sorted[j - 1] > first_[i]; --j) sorted[j] = sorted[j - 1];
      sorted[j] = first_[i];
    }
    const double median = n % 2 ? sorted[n / 2] : 0.5 * (sorted[n / 2 - 1] + sorted[n / 2]);
    const double mad_sigma = median / 0.6744897501960817;  // Phi^-1(3/4)
    s2_ = mad_sigma * mad_sigma;
    effective_ = n;
  } else {
    // A scale still at zero (identical early residuals) has nothing to clip
    // against, so it takes the next residual whole rather than stay stuck.
    const double limit = s2_ > options_.floor * options_.floor
                             ? options_.clip * options_.clip * s2_
                             : u * u;
    const double clipped = std::min(u * u, limit) * correction_;
    effective_ = std::min(effective_ + 1, options_.window);
    s2_ += (clipped - s2_) / effective_;
  }
  sigma_ = std::max(std::sqrt(s2_), options_.floor);
  return true;
}

void ResidualScale::Restart(int effective_count) {
  effective_ = std::clamp(effective_count, 1, options_.window);
}

void ResidualScale::Save(SnapshotWriter& w) const {
  w.Tag("SCAL");
  w.F64(s2_);
  w.F64(sigma_);
  w.I64(count_);
  w.I64(effective_);
  w.Doubles(first_.data(), first_.size());
}

Status ResidualScale::Load(SnapshotReader& r) {
  r.Tag("SCAL");
  s2_ = r.NonNegative("residual scale variance");
  sigma_ = r.NonNegative("residual scale");
  count_ = r.Counter("residual scale readings");
  const std::int64_t effective = r.Counter("residual scale window");
  if (r.ok() && effective > options_.window)
    return r.Fail("residual scale window too large");
  effective_ = static_cast<int>(effective);
  r.Doubles(first_.data(), first_.size());
  return r.status();
}

}  // namespace plumbline
