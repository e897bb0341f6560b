#include "detectors/residual_whitener.h"

#include <algorithm>
#include <cmath>

namespace plumbline {
namespace {

// Running mean over the last ~window values (a plain mean until then).
void Fold(double value, long long count, double* mean) {
  const double weight =
      1.0 / static_cast<double>(std::min<long long>(count, ResidualWhitener::kWindow));
  *mean += (value - *mean) * weight;
}

double Shrunk(double rho, long long count) {
  const double n = static_cast<double>(count);
  return rho * n / (n + 20.0);
}

}  // namespace

double ResidualWhitener::Whiten(EventTime t, double u, double mean_gap, double sigma,
                                bool learn) {
  if (!(mean_gap > 0)) return u;
  const double lags =
      has_previous_ ? std::max(static_cast<double>(t - previous_time_) / mean_gap, 0.0)
                    : 0.0;
  if (learn && sigma > 0) {
    const double limit = 3.0 * sigma;
    const double y = std::clamp(u, -limit, limit);
    const bool pair = has_previous_ && lags <= kMaxLags;
    if (pair) {
      ++pairs_;
      Fold(u1_ * y, pairs_, &cross1_);
      Fold(u1_ * u1_, pairs_, &square_);
      if (has_u2_ && lags1_ <= kMaxLags) {
        ++triples_;
        Fold(u2_ * y, triples_, &cross2_);
        Fold(u2_ * u2_, triples_, &square2_);
      }
      Refit();
    }
    has_u2_ = pair;
    lags1_ = lags;
    u2_ = u1_;
    u1_ = y;
  } else {
    has_u2_ = has_previous_ && lags <= kMaxLags;
    lags1_ = lags;
    u2_ = u1_;
    u1_ = sigma > 0 ? std::clamp(u, -3.0 * sigma, 3.0 * sigma) : u;
  }

  // The filter, in fractions of var(u).
  double predicted_mean = 0.0;
  double predicted_variance = c_;
  if (has_previous_) {
    const double decay = std::pow(phi_, lags);
    predicted_mean = decay * state_mean_;
    predicted_variance = decay * decay * state_variance_ + c_ * (1.0 - decay * decay);
  }
  const double innovation = u - predicted_mean;
  // Floored so two readings at one instant (lag 0, nothing left to whiten)
  // do not divide by zero.
  const double spread = std::max(predicted_variance + (1.0 - c_), kMinSpread);
  const double gain = predicted_variance / spread;
  state_mean_ = predicted_mean + gain * innovation;
  state_variance_ = predicted_variance * (1.0 - gain);
  has_previous_ = true;
  previous_time_ = t;
  return innovation / std::sqrt(spread);
}

void ResidualWhitener::Refit() {
  if (!(square_ > 0)) return;
  rho1_ = std::clamp(Shrunk(cross1_ / square_, pairs_), 0.0, kMaxPhi);
  phi_ = rho1_;
  c_ = 1.0;
  if (rho1_ < kMinRho || !(square2_ > 0)) return;
  const double rho2 = Shrunk(cross2_ / square2_, triples_);
  phi_ = std::clamp(rho2 / rho1_, rho1_, kMaxPhi);
  c_ = rho1_ / phi_;
}

void ResidualWhitener::Restart() {
  has_previous_ = false;
  has_u2_ = false;
  state_mean_ = 0.0;
  state_variance_ = c_;
}

ResidualWhitener::SteadyState ResidualWhitener::Steady() const {
  // Steady state of the filter at one mean gap (the Riccati recursion
  // converges geometrically; 200 rounds are far more than enough for phi <= 0.98).
  const double phi2 = phi_ * phi_;
  double variance = c_;
  double predicted = c_;
  for (int i = 0; i < 200; ++i) {
    predicted = phi2 * variance + c_ * (1.0 - phi2);
    variance = predicted * (1.0 - c_) / (predicted + (1.0 - c_));
  }
  const double spread = predicted + (1.0 - c_);
  if (!(spread > 0)) return {};
  return {predicted / spread, spread};
}

double ResidualWhitener::StepResponse() const {
  const SteadyState s = Steady();
  return (1.0 - phi_) / ((1.0 - phi_ + s.gain * phi_) * std::sqrt(s.spread));
}

double ResidualWhitener::MeanStepResponse(long long n) const {
  // The filter of the header run on a unit step: innovation 1 - phi m, then
  // m moves toward the step by the gain.
  const SteadyState s = Steady();
  n = std::max(1LL, n);
  double m = 0.0, sum = 0.0;
  for (long long i = 0; i < n; ++i) {
    const double innovation = 1.0 - phi_ * m;
    sum += innovation;
    m = phi_ * m + s.gain * innovation;
  }
  return sum / (static_cast<double>(n) * std::sqrt(s.spread));
}

void ResidualWhitener::Save(SnapshotWriter& w) const {
  w.Tag("WHIT");
  w.Bool(has_previous_);
  w.I64(previous_time_);
  for (double v : {state_mean_, state_variance_, u1_, u2_, lags1_}) w.F64(v);
  w.Bool(has_u2_);
  w.I64(pairs_);
  w.I64(triples_);
  for (double v : {square_, cross1_, cross2_, square2_, rho1_, phi_, c_}) w.F64(v);
}

Status ResidualWhitener::Load(SnapshotReader& r) {
  r.Tag("WHIT");
  has_previous_ = r.Bool();
  previous_time_ = r.Time("whitener previous time");
  state_mean_ = r.Finite("whitener state mean");
  state_variance_ = r.NonNegative("whitener state variance");
  u1_ = r.Finite("whitener previous residual");
  u2_ = r.Finite("whitener residual before it");
  lags1_ = r.F64();  // may be infinite (a gap of no use to the fit), never NaN
  if (r.ok() && !(lags1_ >= 0)) return r.Fail("whitener lags is negative or NaN");
  has_u2_ = r.Bool();
  pairs_ = r.Counter("whitener pairs");
  triples_ = r.Counter("whitener triples");
  square_ = r.NonNegative("whitener mean square");
  cross1_ = r.Finite("whitener lag-1 product");
  cross2_ = r.Finite("whitener lag-2 product");
  square2_ = r.NonNegative("whitener lag-2 mean square");
  rho1_ = r.NonNegative("whitener lag-1 correlation");
  phi_ = r.NonNegative("whitener persistence");
  c_ = r.NonNegative("whitener signal share");
  if (!r.ok()) return r.status();
  // Refit keeps rho1 and phi in [0, kMaxPhi] and c = rho1 / phi in (0, 1]; a
  // phi of 1 or more would let the filter's variance grow without bound.
  if (triples_ > pairs_) return r.Fail("whitener has more triples than pairs");
  if (rho1_ > kMaxPhi || phi_ > kMaxPhi) return r.Fail("whitener persistence too high");
  if (!(c_ > 0) || c_ > 1.0) return r.Fail("whitener signal share outside (0, 1]");
  return r.status();
}

}  // namespace plumbline
