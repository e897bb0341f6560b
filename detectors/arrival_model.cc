#include "detectors/arrival_model.h"

#include <algorithm>
#include <cmath>
#include <numbers>

#include "detectors/run_length_chain.h"

namespace plumbline {
namespace {
constexpr double kSlowerReference = 2.0 * std::numbers::ln2;  // theta -> 2 theta
constexpr double kFasterReference = std::numbers::ln2;         // theta -> theta / 2
}  // namespace

bool ArrivalModelOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why) *why = message;
    return false;
  };
  if (warmup < 3 || warmup > 1000000) return fail("arrival warmup must be in [3, 1000000] gaps");
  if (window < 10 || window > 10000000) return fail("arrival window must be in [10, 10000000] gaps");
  if (!(slower_h > 0) || !(faster_h > 0)) return fail("arrival decision intervals must be > 0");
  if (!(gap_cap > 2.0 * std::numbers::ln2)) return fail("arrival gap_cap must be > 2 ln 2");
  return true;
}

StatusOr<ArrivalModelOptions> ArrivalModelOptions::Calibrated(double arl0) {
  ArrivalModelOptions options;
  // Increment of the slower side: X - 2 ln 2, X ~ Exp(1).
  const double cap = options.gap_cap;
  auto slower_cdf = [cap](double y) {
    const double x = y + kSlowerReference;
    if (x >= cap) return 1.0;
    return x <= 0 ? 0.0 : 1.0 - std::exp(-x);
  };
  // Increment of the faster side: ln 2 - X.
  auto faster_cdf = [cap](double y) {
    const double x = kFasterReference - y;  // P(ln2 - X <= y) = P(X >= ln2 - y)
    if (x > cap) return 0.0;
    return x <= 0 ? 1.0 : std::exp(-x);
  };
  auto slower = CalibrateOneSidedCusum(slower_cdf, 2.0 * arl0);
  if (!slower.ok()) return slower.status();
  auto faster = CalibrateOneSidedCusum(faster_cdf, 2.0 * arl0);
  if (!faster.ok()) return faster.status();
  options.slower_h = *slower;
  options.faster_h = *faster;
  return options;
}

ArrivalModel::ArrivalModel(const ArrivalModelOptions& options) : options_(options) {}

Alarm ArrivalModel::Observe(EventTime t) {
  Alarm alarm;
  ++arrivals_;
  if (arrivals_ == 1) {
    last_ = t;
    return alarm;
  }
  const double gap = static_cast<double>(std::max<EventTime>(t - last_, 0));
  last_ = t;
  ++gaps_;
  if (gaps_ <= options_.warmup) {
    theta_ += (gap - theta_) / static_cast<double>(gaps_);
    used_ = gaps_;
    return alarm;
  }
  if (theta_ <= 0) {  // all gaps so far were zero: nothing to scale by yet
    theta_ = gap;
    used_ = 1;
    return alarm;
  }
  // Self-starting transform: theta is the mean of n earlier gaps, so for a
  // Poisson stream P(gap / theta > r) = (1 + r/n)^-n exactly, and
  // x = n ln(1 + r/n) is Exp(1) whatever n is.
  const double n = static_cast<double>(std::min<long long>(used_, options_.window));
  const double x = std::min(n * std::log1p(gap / theta_ / n), options_.gap_cap);
  if (slower_ == 0) slower_start_ = t;
  if (faster_ == 0) faster_start_ = t;
  slower_ = std::max(0.0, slower_ + x - kSlowerReference);
  faster_ = std::max(0.0, faster_ + kFasterReference - x);
  if (slower_ > options_.slower_h) {
    alarm = {true, Direction::kDown, slower_start_, 0.0, slower_};
  } else if (faster_ > options_.faster_h) {
    alarm = {true, Direction::kUp, faster_start_, 0.0, faster_};
  }
  // Every gap joins the baseline (capped, so a silence cannot drag it), which
  // keeps the successive x independent; see the header.
  ++used_;
  theta_ += (std::min(gap, options_.gap_cap * theta_) - theta_) /
            static_cast<double>(std::min<long long>(used_, options_.window));
  return alarm;
}

EventTime ArrivalModel::NextArrivalQuantile(double q) const {
  q = std::clamp(q, 1e-9, 1.0 - 1e-9);
  return last_ + static_cast<EventTime>(theta_ * -std::log1p(-q));
}

void ArrivalModel::Rebaseline() {
  slower_ = faster_ = 0.0;
  gaps_ = used_ = 0;
  theta_ = 0.0;
}

}  // namespace plumbline
