#include "detectors/calibration_health.h"

#include <algorithm>
#include <cmath>
#include <limits>

namespace plumbline {

void CalibrationHealth::Add(double z) {
  if (!std::isfinite(z)) return;
  const double w = std::clamp(z, -kClip, kClip);
  constexpr double kKeep = 1.0 - 1.0 / kMemory;
  weight_ = kKeep * weight_ + 1.0;
  square_ = kKeep * square_ + w * w;
  tail_ = kKeep * tail_ + (std::abs(z) > 3.0 ? 1.0 : 0.0);
  lag_weight_ *= kKeep;
  product_ *= kKeep;
  if (count_ > 0) {
    lag_weight_ += 1.0;
    product_ += w * previous_;
  }
  previous_ = w;
  ++count_;
}

double CalibrationHealth::variance() const {
  return weight_ > 0 ? square_ / weight_ : std::numeric_limits<double>::quiet_NaN();
}

double CalibrationHealth::lag1() const {
  if (!(lag_weight_ > 0 && square_ > 0)) return std::numeric_limits<double>::quiet_NaN();
  return (product_ / lag_weight_) / (square_ / weight_);
}

double CalibrationHealth::tail_share() const {
  return weight_ > 0 ? tail_ / weight_ : std::numeric_limits<double>::quiet_NaN();
}

double CalibrationHealth::drift_ratio() const {
  const double rho = std::clamp(lag1(), -0.9, 0.9);
  return variance() * (1.0 + rho) / (1.0 - rho);
}

void CalibrationHealth::Save(SnapshotWriter& w) const {
  w.Tag("HLTH");
  w.F64(weight_);
  w.F64(lag_weight_);
  w.F64(square_);
  w.F64(product_);
  w.F64(tail_);
  w.F64(previous_);
  w.I64(count_);
}

Status CalibrationHealth::Load(SnapshotReader& r) {
  r.Tag("HLTH");
  CalibrationHealth h;
  h.weight_ = r.NonNegative("health weight");
  h.lag_weight_ = r.NonNegative("health lag weight");
  h.square_ = r.NonNegative("health squares");
  h.product_ = r.Finite("health products");
  h.tail_ = r.NonNegative("health tail");
  h.previous_ = r.Finite("health previous");
  h.count_ = r.Counter("health count");
  if (!r.ok()) return r.status();
  // Weights are sums of a geometric series: at most kMemory; the squares and
  // tail at most the weight times their largest term.
  if (h.weight_ > kMemory * (1 + 1e-9) || h.lag_weight_ > h.weight_ ||
      h.square_ > kClip * kClip * h.weight_ * (1 + 1e-9) ||
      std::abs(h.product_) > kClip * kClip * h.weight_ * (1 + 1e-9) ||
      h.tail_ > h.weight_ * (1 + 1e-9) || std::abs(h.previous_) > kClip) {
    return r.Fail("calibration health out of range");
  }
  *this = h;
  return r.status();
}

}  // namespace plumbline
