#include "detectors/ewma.h"

#include <cassert>
#include <cmath>
#include <cstdio>

#include "detectors/option_checks.h"

namespace plumbline {

using option_checks::Fail;
using option_checks::Format;
using option_checks::RefuseReading;
using option_checks::Arl0IsValid;

namespace {

// Below this (1 - lambda)^(2t) no longer changes 1 - (1 - lambda)^(2t) in
// double precision; flushing it to zero also keeps the recursion out of the
// slow subnormal range.
constexpr double kNegligibleDecay = 1e-20;

}  // namespace

bool EwmaOptions::IsValid(std::string* why) const {
  if (!(lambda > 0.0 && lambda <= 1.0)) {
    return Fail(why, "lambda must be in (0, 1]; got " + Format(lambda));
  }
  if (!(std::isfinite(width) && width > 0.0)) {
    return Fail(why, "width (L) must be finite and > 0; got " + Format(width));
  }
  return Arl0IsValid(arl0, why);
}

StatusOr<Ewma> Ewma::Create(const EwmaOptions& options) {
  std::string why;
  if (!options.IsValid(&why)) return Status::InvalidArgument("ewma: " + why);
  return Ewma(options);
}

Ewma::Ewma(const EwmaOptions& options)
    : options_(options),
      one_minus_lambda_(1.0 - options.lambda),
      decay_squared_((1.0 - options.lambda) * (1.0 - options.lambda)),
      asymptotic_limit_sq_(options.width * options.width * options.lambda /
                           (2.0 - options.lambda)) {
  assert(options.IsValid(nullptr));
  Reset();
}

void Ewma::Restart() {
  z_ = 0.0;
  // t = 0: (1 - lambda)^0 = 1 for exact limits; fixed limits keep it at 0.
  decay_power_ = options_.exact_limits ? 1.0 : 0.0;
  limit_sq_ = asymptotic_limit_sq_ * (1.0 - decay_power_);
  up_ = Run();
  down_ = Run();
  readings_ = 0;
}

void Ewma::Reset() {
  Restart();
  alarms_ = 0;
}

double Ewma::limit() const { return std::sqrt(limit_sq_); }

double Ewma::next_limit() const {
  return std::sqrt(asymptotic_limit_sq_ * (1.0 - decay_power_ * decay_squared_));
}

StatusOr<Alarm> Ewma::Update(double x, EventTime time) {
  if (!std::isfinite(x)) [[unlikely]] {
    return RefuseReading(x);
  }
  ++readings_;
  z_ = options_.lambda * x + one_minus_lambda_ * z_;
  const double power = decay_power_ * decay_squared_;
  decay_power_ = power < kNegligibleDecay ? 0.0 : power;
  limit_sq_ = asymptotic_limit_sq_ * (1.0 - decay_power_);
  up_.Step(z_ > 0.0, x, time);
  down_.Step(z_ < 0.0, x, time);
  Alarm alarm;
  alarm.statistic = z_;
  if (z_ * z_ > limit_sq_) [[unlikely]] {
    const bool up = z_ > 0.0;
    const Run& run = up ? up_ : down_;
    alarm.fired = true;
    alarm.direction = up ? Direction::kUp : Direction::kDown;
    alarm.change_at = run.start;
    alarm.length = run.length;
    alarm.shift = run.sum_x / static_cast<double>(run.length);
    ++alarms_;
    Restart();
  }
  return alarm;
}

void Ewma::Save(SnapshotWriter& w) const {
  w.Tag("EWMA");
  w.F64(z_);
  w.F64(decay_power_);
  w.F64(limit_sq_);
  for (const Run* run : {&up_, &down_}) {
    w.I64(run->start);
    w.I64(run->length);
    w.F64(run->sum_x);
  }
  w.I64(readings_);
  w.I64(alarms_);
}

Status Ewma::Load(SnapshotReader& r) {
  r.Tag("EWMA");
  z_ = r.Finite("ewma statistic");
  decay_power_ = r.NonNegative("ewma decay power");
  limit_sq_ = r.NonNegative("ewma squared limit");
  for (Run* run : {&up_, &down_}) {
    run->start = r.Time("ewma run start");
    run->length = r.Counter("ewma run length");
    run->sum_x = r.Finite("ewma run sum");
  }
  readings_ = r.Counter("ewma readings");
  alarms_ = r.Counter("ewma alarms");
  return r.status();
}

}  // namespace plumbline
