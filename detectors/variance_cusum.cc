#include "detectors/variance_cusum.h"

#include <algorithm>
#include <cmath>

#include "detectors/calibration_memo.h"
#include "detectors/run_length_chain.h"

namespace plumbline {
namespace {

double Reference(double rho) { return rho * std::log(rho) / (rho - 1.0); }

// P(min(Z^2, cap) <= x), Z ~ N(0, 1).
double CappedChiSquareCdf(double x, double cap) {
  if (x < 0) return 0.0;
  if (x >= cap) return 1.0;
  return std::erf(std::sqrt(0.5 * x));
}

}  // namespace

bool VarianceCusumOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why) *why = message;
    return false;
  };
  if (!(rho_up > 1 && rho_up <= 100)) return fail("rho_up must be in (1, 100]");
  if (!(rho_down >= 0.01 && rho_down < 1)) return fail("rho_down must be in [0.01, 1)");
  if (!(cap > k_up())) return fail("cap must exceed the wider side's reference value");
  if (!(up_h > 0) || !(down_h > 0)) return fail("variance decision intervals must be > 0");
  return true;
}

double VarianceCusumOptions::k_up() const { return Reference(rho_up); }
double VarianceCusumOptions::k_down() const { return Reference(rho_down); }

namespace {

StatusOr<VarianceCusumOptions> CalibrateVarianceCusum(double arl0) {
  VarianceCusumOptions options;
  const double k_up = options.k_up(), k_down = options.k_down(), cap = options.cap;
  auto up = CalibrateOneSidedCusum(
      [=](double y) { return CappedChiSquareCdf(y + k_up, cap); }, 2.0 * arl0);
  if (!up.ok()) return up.status();
  // Narrower side: increment k_down - q; P(k_down - q <= y) = 1 - P(q < k_down - y).
  auto down = CalibrateOneSidedCusum(
      [=](double y) { return 1.0 - CappedChiSquareCdf(k_down - y, cap); }, 2.0 * arl0);
  if (!down.ok()) return down.status();
  options.up_h = *up;
  options.down_h = *down;
  return options;
}

}  // namespace

StatusOr<VarianceCusumOptions> VarianceCusumOptions::Calibrated(double arl0) {
  static CalibrationMemo<VarianceCusumOptions> memo;
  return memo.Get(arl0, [arl0] { return CalibrateVarianceCusum(arl0); });
}

VarianceCusum::VarianceCusum(const VarianceCusumOptions& options)
    : options_(options), k_up_(options.k_up()), k_down_(options.k_down()) {}

Alarm VarianceCusum::Update(double z, EventTime time) {
  if (!std::isfinite(z)) return Alarm{};
  if (has_spike_) {
    has_spike_ = false;
    if (z * z >= options_.cap) {  // not isolated: both readings count
      const Alarm first = Step(spike_z_, spike_time_);
      const Alarm second = Step(z, time);
      return first.fired ? first : second;
    }
    // Otherwise the held reading was an isolated spike: it is dropped.
  } else if (std::abs(z) >= kSpike) {
    has_spike_ = true;
    spike_z_ = z;
    spike_time_ = time;
    return Alarm{};
  }
  return Step(z, time);
}

Alarm VarianceCusum::Step(double z, EventTime time) {
  Alarm alarm;
  const double q = std::min(z * z, options_.cap);
  auto step = [&](Side& side, double increment) {
    if (side.statistic == 0) side = Side{0.0, time, 0, 0, 0};
    side.statistic = std::max(0.0, side.statistic + increment);
    side.n += 1;
    side.sum += z;
    side.sum_sq += z * z;
  };
  if (up_.statistic == 0) {
    excursion_.clear();
  } else if (excursion_.size() >= 2 * kExcursionValues) {
    excursion_.erase(excursion_.begin(), excursion_.begin() + kExcursionValues);
  }
  excursion_.push_back(z);
  step(up_, q - k_up_);
  step(down_, k_down_ - q);
  auto spread = [](const Side& s) {
    const double m = s.sum / s.n;
    return std::max(s.sum_sq / s.n - m * m, 0.0);
  };
  auto fire = [&](Direction direction, const Side& s) {
    Alarm a;
    a.fired = true;
    a.direction = direction;
    a.change_at = s.start;
    a.shift = std::sqrt(spread(s));
    a.statistic = s.statistic;
    a.length = static_cast<std::int64_t>(s.n);
    return a;
  };
  if (up_.statistic > options_.up_h) {
    if (SpreadExplainsExcursion()) {
      alarm = fire(Direction::kUp, up_);
      Reset();
    }
  } else if (down_.statistic > options_.down_h) {
    alarm = fire(Direction::kDown, down_);
    Reset();
  }
  return alarm;
}

bool VarianceCusum::SpreadExplainsExcursion() const {
  // Log-likelihood ratios against N(0, 1), each maximised over the start tau of
  // the final segment z_tau..z_n (length L, sum S, sum of squares Q):
  //   level shift, N(delta, 1):  S^2 / (2 L)
  //   wider spread, N(0, rho):   L/2 (s2 - 1 - ln s2),  s2 = Q / L > 1
  double sum = 0.0, sum_sq = 0.0, level = 0.0, spread = 0.0;
  for (size_t i = excursion_.size(); i-- > 0;) {
    sum += excursion_[i];
    sum_sq += excursion_[i] * excursion_[i];
    const double length = static_cast<double>(excursion_.size() - i);
    level = std::max(level, sum * sum / (2.0 * length));
    const double s2 = sum_sq / length;
    if (s2 > 1.0) spread = std::max(spread, 0.5 * length * (s2 - 1.0 - std::log(s2)));
  }
  return spread > level;
}

void VarianceCusum::SetDecisionIntervals(double up_h, double down_h) {
  if (up_h > 0) options_.up_h = up_h;
  if (down_h > 0) options_.down_h = down_h;
}

void VarianceCusum::Reset() {
  up_ = down_ = Side{};
  excursion_.clear();
  has_spike_ = false;
}

void VarianceCusum::Save(SnapshotWriter& w) const {
  w.Tag("VARC");
  w.F64(options_.up_h);
  w.F64(options_.down_h);
  for (const Side* s : {&up_, &down_}) {
    w.F64(s->statistic);
    w.I64(s->start);
    w.F64(s->n);
    w.F64(s->sum);
    w.F64(s->sum_sq);
  }
  w.DoubleVector(excursion_);
  w.Bool(has_spike_);
  w.F64(spike_z_);
  w.I64(spike_time_);
}

Status VarianceCusum::Load(SnapshotReader& r) {
  r.Tag("VARC");
  options_.up_h = r.NonNegative("variance cusum upper threshold");
  options_.down_h = r.NonNegative("variance cusum lower threshold");
  for (Side* s : {&up_, &down_}) {
    s->statistic = r.Finite("variance cusum statistic");
    s->start = r.Time("variance cusum start");
    s->n = r.NonNegative("variance cusum run length");
    s->sum = r.Finite("variance cusum sum");
    s->sum_sq = r.NonNegative("variance cusum sum of squares");
  }
  excursion_ = r.DoubleVector();
  has_spike_ = r.Bool();
  spike_z_ = r.Finite("variance cusum spike");
  spike_time_ = r.Time("variance cusum spike time");
  return r.status();
}

}  // namespace plumbline
