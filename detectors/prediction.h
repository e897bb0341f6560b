// Forecasts on demand: what will a series read at a time T, and when will its
// next reading come. Pure computation over a SeriesMonitor's read-only views;
// thread-compatible (call on the thread that owns the monitor).
//
// Reading at T (the continuous-time model of series_monitor.h):
//
//   f(T)  = the forecaster's x(T)' theta: level, trend carried forward to T,
//           every season's harmonics at T's phase (seasonal_forecaster.h)
//   v(T)  = x' P x / lambda(T) + q (T - t_last) / unit: the coefficients'
//           uncertainty, grown by forgetting over the horizon, plus the level's
//           random-walk variance accrued over it (level noise, when the model
//           has it)
//   b     = T's bin in the residual phase profile (residual_profile.h)
//   mean  = f(T) + m_b sqrt(1 + v(T))        m_b: the residual mean at that phase
//   sd    = s_b sqrt(1 + v(T))               s_b: the residual spread at that phase
//   interval = mean -/+ z sd,  z = Phi^-1((1 + level) / 2)
//
// s_b is the spread of the standardised, whitened residual, which has the
// variance of the unconditional residual (residual_whitener.h), so the
// interval is the unconditional one at T's phase: it does not narrow for a T
// just after the last reading when residuals are autocorrelated (slightly
// wide there), and is right once T is more than a few mean gaps ahead. The
// normal quantile assumes near-normal residuals; the outside check in
// tests/detectors/forecast_coverage_test.cc measures coverage on open data.
//
// Next reading: the arrival model's exponential gaps in operational time
// (arrival_model.h): quantile q at t_last + theta (-ln(1 - q)) stretched by
// the arrival season, the expected time at one mean gap after t_last.
#pragma once

#include <vector>

#include "detectors/event_time.h"
#include "detectors/series_monitor.h"
#include "detectors/status.h"

namespace plumbline {

struct ReadingForecast {
  EventTime at = 0;
  double value = 0.0;            // predicted reading (mean)
  double sd = 0.0;               // predictive standard deviation
  double level = 0.95;           // the interval's coverage
  double low = 0.0, high = 0.0;  // the prediction interval
  EventTime horizon = 0;         // at - the model's last observation
};

// Fails with FailedPrecondition before the model has started (the first
// observations set its memory and phase bins) or before the residual scale is
// known, and with InvalidArgument when at is earlier than the model's last
// observation or level is outside (0, 1).
StatusOr<ReadingForecast> ForecastReading(const SeriesMonitor& monitor, EventTime at,
                                          double level = 0.95);

struct NextReadingForecast {
  EventTime last = 0;      // the latest reading's time
  EventTime expected = 0;  // one mean gap (of operational time) after last
  struct Quantile {
    double probability = 0.0;
    EventTime time = 0;
  };
  std::vector<Quantile> quantiles;  // as asked, each probability in (0, 1)
};

// FailedPrecondition before the arrival model knows a mean gap (two readings);
// InvalidArgument for a probability outside (0, 1).
StatusOr<NextReadingForecast> ForecastNextReading(
    const SeriesMonitor& monitor,
    const std::vector<double>& probabilities = {0.1, 0.5, 0.9});

// Phi^-1(p) for p in (0, 1), NaN outside: Newton's method on the normal tail
// (erfc) from 0, to full double precision (common practice, no source).
double NormalQuantile(double p);

}  // namespace plumbline
