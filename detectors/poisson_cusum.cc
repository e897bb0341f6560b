#include "detectors/poisson_cusum.h"

#include <Eigen/LU>
#include <algorithm>
#include <cassert>
#include <cmath>
#include <cstdint>
#include <limits>
#include <vector>

#include "detectors/eigen_types.h"
#include "detectors/option_checks.h"
#include "detectors/prediction.h"

namespace plumbline {

using option_checks::Arl0IsValid;
using option_checks::Fail;
using option_checks::Format;

namespace {

// Relative tolerance for ties with h and for a statistic that should be 0.
constexpr double kTieTolerance = 1e-9;
// Largest common denominator the chain looks for.
constexpr int kMaxDenominator = 1000;
// Automatic rounding of k in the calibration: denominators 1..20, 5% move.
constexpr int kAutoMaxDenominator = 20;
constexpr double kAutoRoundingTolerance = 0.05;

bool IsFinitePositive(double x) { return std::isfinite(x) && x > 0.0; }

[[gnu::noinline, gnu::cold]] Status RefuseCount(double count) {
  return Status::InvalidArgument(
      "count must be a finite, non-negative whole number; got " + Format(count));
}

// The nearest integer to x * d when x * d is within the tie tolerance of one.
std::optional<std::int64_t> ScaledInteger(double x, int d) {
  const double scaled = x * d;
  const double nearest = std::round(scaled);
  if (std::abs(scaled - nearest) > kTieTolerance * (1.0 + std::abs(scaled))) {
    return std::nullopt;
  }
  return static_cast<std::int64_t>(nearest);
}

// Poisson(mu) probabilities p(0..n-1), their running sums P(X <= x) and upper
// tails P(X >= x), computed from logs by the recurrence
// ln p(x) = ln p(x-1) + ln mu - ln x (no factorial overflow), tails summed from
// far beyond the mode so that small tails keep their relative accuracy.
struct PoissonTable {
  std::vector<double> pmf, cdf, tail;

  PoissonTable(double mu, std::int64_t n) {
    // Sum tails from where the pmf is negligible (below 1e-300 of the mass).
    const std::int64_t far = std::max<std::int64_t>(
        n, static_cast<std::int64_t>(mu + 40.0 * std::sqrt(mu) + 60.0));
    std::vector<double> all(static_cast<std::size_t>(far + 1));
    const double log_mu = std::log(mu);
    double log_p = -mu;
    for (std::int64_t x = 0; x <= far; ++x) {
      if (x > 0) log_p += log_mu - std::log(static_cast<double>(x));
      all[static_cast<std::size_t>(x)] = std::exp(log_p);
    }
    pmf.assign(all.begin(), all.begin() + n);
    cdf.resize(static_cast<std::size_t>(n));
    double running = 0.0;
    for (std::int64_t x = 0; x < n; ++x) {
      running += all[static_cast<std::size_t>(x)];
      cdf[static_cast<std::size_t>(x)] = std::min(running, 1.0);
    }
    tail.resize(static_cast<std::size_t>(n));
    double upper = 0.0;
    for (std::int64_t x = far; x >= 0; --x) {
      upper += all[static_cast<std::size_t>(x)];
      if (x < n) tail[static_cast<std::size_t>(x)] = std::min(upper, 1.0);
    }
  }
  double Pmf(std::int64_t x) const {
    return (x < 0 || x >= static_cast<std::int64_t>(pmf.size()))
               ? 0.0
               : pmf[static_cast<std::size_t>(x)];
  }
  // P(X <= x); x < n.
  double Cdf(std::int64_t x) const {
    return x < 0 ? 0.0 : cdf[static_cast<std::size_t>(x)];
  }
  // P(X >= x); x < n.
  double Tail(std::int64_t x) const {
    return x <= 0 ? 1.0 : tail[static_cast<std::size_t>(x)];
  }
};

// Floor and ceiling of a / d for d > 0.
std::int64_t FloorDiv(std::int64_t a, std::int64_t d) {
  return a >= 0 ? a / d : -((-a + d - 1) / d);
}
std::int64_t CeilDiv(std::int64_t a, std::int64_t d) { return -FloorDiv(-a, d); }

// The exact chain on scaled integers: k = a/d, h = b/d, start = c/d.
StatusOr<double> ScaledChainArl(double mu, std::int64_t a, std::int64_t b, std::int64_t c,
                                std::int64_t d, PoissonSignalRule rule,
                                PoissonCusumSide side) {
  // Transient states 0..m-1.
  const std::int64_t m = rule == PoissonSignalRule::kAtLeast ? b : b + 1;
  // Largest count any transition needs, plus one.
  const std::int64_t n = (m + a) / d + 2;
  const PoissonTable poisson(mu, n);
  Matrix system = Matrix::Identity(m, m);  // I - R
  for (std::int64_t i = 0; i < m; ++i) {
    if (side == PoissonCusumSide::kUpper) {
      // S' = i + d X - a.
      system(i, 0) -= poisson.Cdf(FloorDiv(a - i, d));
      for (std::int64_t j = 1; j < m; ++j) {
        const std::int64_t jump = j - i + a;
        if (jump >= 0 && jump % d == 0) system(i, j) -= poisson.Pmf(jump / d);
      }
    } else {
      // T' = i + a - d X.
      system(i, 0) -= poisson.Tail(CeilDiv(i + a, d));
      for (std::int64_t j = 1; j < m; ++j) {
        const std::int64_t drop = i + a - j;
        if (drop >= 0 && drop % d == 0) system(i, j) -= poisson.Pmf(drop / d);
      }
    }
  }
  const Vector arl = system.partialPivLu().solve(Vector::Ones(m));
  const double result = arl(c);
  if (!(std::isfinite(result) && result >= 1.0)) {
    return Status::OutOfRange(
        "poisson cusum arl: the chain is numerically singular (ARL " + Format(result) +
        ")");
  }
  return result;
}

}  // namespace

// ---------------------------------------------------------------------------
// Enums

std::string_view ToString(PoissonSignalRule rule) {
  switch (rule) {
    case PoissonSignalRule::kAtLeast:
      return "at_least";
    case PoissonSignalRule::kAbove:
      return "above";
  }
  return "at_least";
}

std::optional<PoissonSignalRule> PoissonSignalRuleFromString(std::string_view text) {
  if (text == "at_least") return PoissonSignalRule::kAtLeast;
  if (text == "above") return PoissonSignalRule::kAbove;
  return std::nullopt;
}

std::string_view ToString(PoissonCusumSide side) {
  switch (side) {
    case PoissonCusumSide::kUpper:
      return "upper";
    case PoissonCusumSide::kLower:
      return "lower";
  }
  return "upper";
}

std::optional<PoissonCusumSide> PoissonCusumSideFromString(std::string_view text) {
  if (text == "upper") return PoissonCusumSide::kUpper;
  if (text == "lower") return PoissonCusumSide::kLower;
  return std::nullopt;
}

// ---------------------------------------------------------------------------
// Options

bool PoissonCusumOptions::IsValid(std::string* why) const {
  if (!IsFinitePositive(mu0)) {
    return Fail(why, "mu0 must be finite and > 0; got " + Format(mu0));
  }
  if (!IsFinitePositive(k))
    return Fail(why, "k must be finite and > 0; got " + Format(k));
  if (!IsFinitePositive(h))
    return Fail(why, "h must be finite and > 0; got " + Format(h));
  if (!(headstart >= 0.0 && headstart < h)) {
    return Fail(why, "headstart must be in [0, h) with h = " + Format(h) + "; got " +
                         Format(headstart));
  }
  if (two_sided) {
    if (!IsFinitePositive(k_down)) {
      return Fail(why, "k_down must be finite and > 0; got " + Format(k_down));
    }
    if (!IsFinitePositive(h_down)) {
      return Fail(why, "h_down must be finite and > 0; got " + Format(h_down));
    }
    if (!(headstart_down >= 0.0 && headstart_down < h_down)) {
      return Fail(why, "headstart_down must be in [0, h_down) with h_down = " +
                           Format(h_down) + "; got " + Format(headstart_down));
    }
  }
  if (rule != PoissonSignalRule::kAtLeast && rule != PoissonSignalRule::kAbove) {
    return Fail(why, "rule must be at_least or above");
  }
  return Arl0IsValid(arl0, why);
}

// ---------------------------------------------------------------------------
// PoissonCusum

void PoissonCusum::Side::Restart(double headstart) {
  value = headstart;
  origin = headstart;
  length = 0;
  start = 0;
  excess = 0.0;
}

void PoissonCusum::Side::Step(double increment, double deviation, EventTime time,
                              double zero) {
  const double next = value + increment;
  const bool positive = next > zero;
  value = positive ? next : 0.0;
  origin = positive ? origin : 0.0;
  start = (positive && length == 0) ? time : start;
  length = positive ? length + 1 : 0;
  excess = positive ? excess + deviation : 0.0;
}

StatusOr<PoissonCusum> PoissonCusum::Create(const PoissonCusumOptions& options) {
  std::string why;
  if (!options.IsValid(&why)) return Status::InvalidArgument("poisson cusum: " + why);
  return PoissonCusum(options);
}

PoissonCusum::PoissonCusum(const PoissonCusumOptions& options)
    : options_(options),
      zero_up_(kTieTolerance * (1.0 + options.h)),
      zero_down_(kTieTolerance * (1.0 + options.h_down)) {
  assert(options.IsValid(nullptr));
  Reset();
}

void PoissonCusum::Restart() {
  upper_.Restart(options_.headstart);
  lower_.Restart(options_.two_sided ? options_.headstart_down : 0.0);
  readings_ = 0;
}

void PoissonCusum::Reset() {
  Restart();
  alarms_ = 0;
}

void PoissonCusum::SetDecisionIntervals(double h, double h_down) {
  if (std::isfinite(h) && h > options_.headstart) options_.h = h;
  if (std::isfinite(h_down) && h_down > options_.headstart_down) options_.h_down = h_down;
  zero_up_ = kTieTolerance * (1.0 + options_.h);
  zero_down_ = kTieTolerance * (1.0 + options_.h_down);
}

bool PoissonCusum::Signals(double value, double h) const {
  const double tolerance = kTieTolerance * (1.0 + h);
  return options_.rule == PoissonSignalRule::kAtLeast ? value >= h - tolerance
                                                      : value > h + tolerance;
}

StatusOr<Alarm> PoissonCusum::Update(double count, EventTime time, double mean_ratio,
                                     double down_ratio) {
  if (!(std::isfinite(count) && count >= 0.0 && count == std::floor(count)))
      [[unlikely]] {
    return RefuseCount(count);
  }
  if (!IsFinitePositive(mean_ratio)) [[unlikely]] {
    return Status::InvalidArgument("mean ratio must be finite and > 0; got " +
                                   Format(mean_ratio));
  }
  if (!(std::isfinite(down_ratio) && down_ratio >= 0.0)) [[unlikely]] {
    return Status::InvalidArgument("lower side's mean ratio must be finite and >= 0; got " +
                                   Format(down_ratio));
  }
  ++readings_;
  const double deviation = count - mean_ratio * options_.mu0;
  upper_.Step(count - mean_ratio * options_.k, deviation, time, zero_up_);
  Alarm alarm;
  alarm.statistic = upper_.value;
  bool up = Signals(upper_.value, options_.h);
  bool down = false;
  if (options_.two_sided) {
    lower_.Step(down_ratio * options_.k_down - count, deviation, time, zero_down_);
    alarm.statistic = std::max(alarm.statistic, lower_.value);
    down = Signals(lower_.value, options_.h_down);
  }
  if (up || down) [[unlikely]] {
    // Both sides signal together only if S + T reaches h + h_down, with both
    // sides positive, in one reading from below the limits; S + T then changes
    // by k_down - k, so that needs k_down - k > 0. If it happens, report the
    // upper side.
    const Side& side = up ? upper_ : lower_;
    alarm.fired = true;
    alarm.direction = up ? Direction::kUp : Direction::kDown;
    alarm.change_at = side.start;
    alarm.length = side.length;
    alarm.shift = side.excess / static_cast<double>(side.length);
    ++alarms_;
    Restart();
  }
  return alarm;
}

namespace {
void SaveSide(double value, double origin, std::int64_t length, EventTime start,
              double excess, SnapshotWriter& w) {
  w.F64(value);
  w.F64(origin);
  w.I64(length);
  w.I64(start);
  w.F64(excess);
}
}  // namespace

void PoissonCusum::Save(SnapshotWriter& w) const {
  w.Tag("PCSM");
  const PoissonCusumOptions& o = options_;
  for (double x : {o.mu0, o.k, o.h, o.headstart, o.k_down, o.h_down, o.headstart_down,
                   o.arl0}) {
    w.F64(x);
  }
  w.Bool(o.two_sided);
  w.U8(static_cast<std::uint8_t>(o.rule));
  SaveSide(upper_.value, upper_.origin, upper_.length, upper_.start, upper_.excess, w);
  SaveSide(lower_.value, lower_.origin, lower_.length, lower_.start, lower_.excess, w);
  w.I64(readings_);
  w.I64(alarms_);
}

Status PoissonCusum::Load(SnapshotReader& r) {
  r.Tag("PCSM");
  PoissonCusumOptions o;
  for (double* x : {&o.mu0, &o.k, &o.h, &o.headstart, &o.k_down, &o.h_down,
                    &o.headstart_down, &o.arl0}) {
    *x = r.Finite("count cusum option");
  }
  o.two_sided = r.Bool();
  const std::uint8_t rule = r.U8();
  if (!r.ok()) return r.status();
  if (rule > static_cast<std::uint8_t>(PoissonSignalRule::kAbove)) {
    return r.Fail("count cusum signal rule out of range");
  }
  o.rule = static_cast<PoissonSignalRule>(rule);
  std::string why;
  if (!o.IsValid(&why)) return r.Fail("count cusum options: " + why);
  PoissonCusum loaded(o);
  for (Side* side : {&loaded.upper_, &loaded.lower_}) {
    side->value = r.NonNegative("count cusum statistic");
    side->origin = r.NonNegative("count cusum origin");
    side->length = r.Counter("count cusum run length");
    side->start = r.Time("count cusum start");
    side->excess = r.Finite("count cusum excess");
  }
  loaded.readings_ = r.Counter("count cusum readings");
  loaded.alarms_ = r.Counter("count cusum alarms");
  if (!r.ok()) return r.status();
  *this = loaded;
  return r.status();
}

// ---------------------------------------------------------------------------
// Run lengths and calibration

StatusOr<double> PoissonCusumReferenceValue(double mu0, double mu1) {
  if (!IsFinitePositive(mu0)) {
    return Status::InvalidArgument("poisson cusum: mu0 must be finite and > 0; got " +
                                   Format(mu0));
  }
  if (!IsFinitePositive(mu1)) {
    return Status::InvalidArgument("poisson cusum: mu1 must be finite and > 0; got " +
                                   Format(mu1));
  }
  if (mu0 == mu1) {
    return Status::InvalidArgument("poisson cusum: mu1 must differ from mu0 = " +
                                   Format(mu0));
  }
  return (mu1 - mu0) / (std::log(mu1) - std::log(mu0));
}

StatusOr<double> PoissonCusumArl(double mu, double k, double h, double start,
                                 PoissonSignalRule rule, PoissonCusumSide side) {
  if (!IsFinitePositive(mu)) {
    return Status::InvalidArgument("poisson cusum arl: mu must be finite and > 0; got " +
                                   Format(mu));
  }
  if (!IsFinitePositive(k)) {
    return Status::InvalidArgument("poisson cusum arl: k must be finite and > 0; got " +
                                   Format(k));
  }
  if (!IsFinitePositive(h)) {
    return Status::InvalidArgument("poisson cusum arl: h must be finite and > 0; got " +
                                   Format(h));
  }
  if (!(start >= 0.0 && start < h)) {
    return Status::InvalidArgument(
        "poisson cusum arl: start must be in [0, h) with h = " + Format(h) + "; got " +
        Format(start));
  }
  for (int d = 1; d <= kMaxDenominator; ++d) {
    const auto a = ScaledInteger(k, d);
    const auto b = ScaledInteger(h, d);
    const auto c = ScaledInteger(start, d);
    if (!a || !b || !c) continue;
    const std::int64_t states = rule == PoissonSignalRule::kAtLeast ? *b : *b + 1;
    if (states > kMaxChainStates) break;
    return ScaledChainArl(mu, *a, *b, *c, d, rule, side);
  }
  return Status::InvalidArgument(
      "poisson cusum arl: k = " + Format(k) + ", h = " + Format(h) +
      " and start = " + Format(start) +
      " must be multiples of a common 1/d with d <= " + Format(kMaxDenominator) +
      " and h d <= " + Format(kMaxChainStates) + " (round k to a simple fraction)");
}

StatusOr<PoissonCusumDesign> CalibratePoissonCusum(double mu0, double mu1, double arl0,
                                                   PoissonSignalRule rule,
                                                   int k_denominator) {
  const StatusOr<double> reference = PoissonCusumReferenceValue(mu0, mu1);
  if (!reference.ok()) return reference.status();
  if (!(std::isfinite(arl0) && arl0 >= 1.0)) {
    return Status::InvalidArgument(
        "poisson cusum calibration: arl0 must be finite and >= 1; got " + Format(arl0));
  }
  if (k_denominator < 0 || k_denominator > kMaxDenominator) {
    return Status::InvalidArgument(
        "poisson cusum calibration: k_denominator must be in [0, 1000] (0 = automatic); "
        "got " +
        Format(k_denominator));
  }
  PoissonCusumDesign design;
  design.side = mu1 > mu0 ? PoissonCusumSide::kUpper : PoissonCusumSide::kLower;
  design.reference_value = *reference;
  const double k_exact = *reference;
  // The rounded k for denominator d (at least 1/d, so k stays > 0).
  auto rounded = [k_exact](int d) { return std::max(1.0, std::round(k_exact * d)) / d; };
  int d = k_denominator;
  if (d == 0) {
    double best_move = HUGE_VAL;
    for (int candidate = 1; candidate <= kAutoMaxDenominator; ++candidate) {
      const double move = std::abs(rounded(candidate) - k_exact) / k_exact;
      if (move <= kAutoRoundingTolerance) {
        d = candidate;
        break;
      }
      if (move < best_move) {
        best_move = move;
        d = candidate;
      }
    }
  }
  design.k_denominator = d;
  design.k = rounded(d);

  // Largest whole h the chain can take with this denominator.
  const int h_max =
      (rule == PoissonSignalRule::kAtLeast ? kMaxChainStates : kMaxChainStates - 1) / d;
  auto arl_at = [&](int h, double mu) {
    return PoissonCusumArl(mu, design.k, h, 0.0, rule, design.side);
  };
  if (h_max < 1) {
    return Status::OutOfRange("poisson cusum calibration: k_denominator " + Format(d) +
                              " leaves no room for h");
  }
  // ARL0 is non-decreasing in h: double until the target is reached, then bisect.
  int low = 0;  // invariant: ARL0(low) < arl0 (h = 0 stands for "signal at once")
  int high = 1;
  while (true) {
    const StatusOr<double> arl = arl_at(high, mu0);
    if (!arl.ok()) return arl.status();
    if (*arl >= arl0) break;
    if (high == h_max) {
      return Status::OutOfRange("poisson cusum calibration: arl0 = " + Format(arl0) +
                                " needs h above " + Format(h_max) +
                                " for k = " + Format(design.k));
    }
    low = high;
    high = std::min(2 * high, h_max);
  }
  while (high - low > 1) {
    const int middle = low + (high - low) / 2;
    const StatusOr<double> arl = arl_at(middle, mu0);
    if (!arl.ok()) return arl.status();
    (*arl >= arl0 ? high : low) = middle;
  }
  design.h = high;
  const StatusOr<double> in_control = arl_at(high, mu0);
  const StatusOr<double> out_of_control = arl_at(high, mu1);
  if (!in_control.ok()) return in_control.status();
  if (!out_of_control.ok()) return out_of_control.status();
  design.arl0 = *in_control;
  design.arl1 = *out_of_control;
  return design;
}

double PoissonMidPQuantileResidual(double y, double mean) {
  if (!(mean > 0) || !std::isfinite(mean) || std::isnan(y)) {
    return std::numeric_limits<double>::quiet_NaN();
  }
  // Called per reading, so the mass is summed term by term without the
  // allocations of PoissonTable (the chain's tables above). Counts beyond this
  // are far in the upper tail of any mean the monitor asks about (below
  // kLowCountMean).
  constexpr double kMaxCount = 100000;
  const long long count =
      static_cast<long long>(std::clamp(std::floor(y), 0.0, kMaxCount));
  double mass = std::exp(-mean), below = 0;
  for (long long k = 0; k < count; ++k) {
    below += mass;
    mass *= mean / static_cast<double>(k + 1);
  }
  const double at = mass;
  // A tail that underflows (a count hundreds of sd from its mean) is held at
  // 1e-300, where NormalQuantile gives its largest answer, about 20 sd.
  constexpr double kSmallestTail = 1e-300;
  const double lower = below + 0.5 * at;
  if (lower < 0.5) return NormalQuantile(std::max(lower, kSmallestTail));
  // At or above the median the upper tail P(Y > count) is the smaller one, and
  // its terms fall at least geometrically (count + 1 exceeds the mean there).
  double above = 0, term = mass;
  for (long long k = count + 1;; ++k) {
    term *= mean / static_cast<double>(k);
    above += term;
    if (!(term > above * 1e-17) || k > count + 100000) break;
  }
  return -NormalQuantile(std::max(above + 0.5 * at, kSmallestTail));
}

}  // namespace plumbline
