#include "detectors/prediction.h"

#include <algorithm>
#include <cmath>
#include <numbers>

namespace plumbline {

namespace {

// The x > 0 with P(Z > x) = q, for q in (0, 1/2]: Newton's method on the
// upper tail 0.5 erfc(x / sqrt 2), which is convex and falling for x > 0, so
// the steps from 0 rise monotonically to the root without overshooting, and
// the tail is computed without cancellation however small q is.
double UpperTailPoint(double q) {
  double x = 0.0;
  for (int i = 0; i < 200; ++i) {
    const double tail = 0.5 * std::erfc(x / std::numbers::sqrt2);
    const double density = std::exp(-0.5 * x * x) / std::sqrt(2.0 * std::numbers::pi);
    const double step = (tail - q) / density;
    x += step;
    if (std::abs(step) <= 1e-15 * std::max(1.0, x)) break;
  }
  return x;
}

}  // namespace

double NormalQuantile(double p) {
  if (!(p > 0.0 && p < 1.0)) return std::nan("");
  return p < 0.5 ? -UpperTailPoint(p) : UpperTailPoint(1.0 - p);
}

StatusOr<ReadingForecast> ForecastReading(const SeriesMonitor& monitor, EventTime at,
                                          double level) {
  if (!(level > 0.0 && level < 1.0)) {
    return Status::InvalidArgument("level must be in (0, 1)");
  }
  const SeasonalForecaster* forecaster = monitor.forecaster();
  const ResidualProfile* profile = monitor.residual_profile();
  if (!forecaster || !forecaster->has_data() || !profile) {
    return Status::FailedPrecondition("the model has not started yet (too few readings)");
  }
  const double sigma = monitor.scale().sigma();
  if (!(sigma > 0.0)) {
    return Status::FailedPrecondition("the residual scale is not known yet");
  }
  if (at < forecaster->last_time()) {
    return Status::InvalidArgument(
        "at is earlier than the model's last observation; forecasts look ahead");
  }
  const Forecast f = forecaster->Predict(at);
  const double spread = std::sqrt(1.0 + std::max(0.0, f.parameter_variance_factor));
  const int bin = profile->Bin(at);
  ReadingForecast out;
  out.at = at;
  out.level = level;
  out.horizon = at - forecaster->last_time();
  out.value = f.value + profile->Mean(bin, sigma) * spread;
  out.sd = monitor.PhaseSigma(bin) * spread;
  const double half = NormalQuantile(0.5 * (1.0 + level)) * out.sd;
  out.low = out.value - half;
  out.high = out.value + half;
  return out;
}

StatusOr<NextReadingForecast> ForecastNextReading(
    const SeriesMonitor& monitor, const std::vector<double>& probabilities) {
  for (double p : probabilities) {
    if (!(p > 0.0 && p < 1.0)) {
      return Status::InvalidArgument("quantile probabilities must be in (0, 1)");
    }
  }
  const ArrivalModel& arrivals = monitor.arrivals();
  if (!(arrivals.mean_gap() > 0.0)) {
    return Status::FailedPrecondition(
        "the arrival model needs two readings before it knows a mean gap");
  }
  NextReadingForecast out;
  out.last = arrivals.last_arrival();
  out.expected = arrivals.TimeAfterMeanGaps(out.last, 1.0);
  for (double p : probabilities) {
    out.quantiles.push_back({p, arrivals.NextArrivalQuantile(p)});
  }
  return out;
}

}  // namespace plumbline
