// SeasonalForecaster: a level + local linear trend + Fourier seasonal model in
// continuous time, fitted online by recursive least squares with exponential
// forgetting measured in time. Not thread-safe; owned by one shard.
//
// Model, at a reading's own timestamp t (no resampling):
//
//   y(t) = l + b * (t - t_ref) / U
//          + sum over seasons s, harmonics j = 1..J_s of
//              a_sj * cos(2 pi j phase_s(t)) + c_sj * sin(2 pi j phase_s(t))   + noise
//
//          + sum over covariates k of g_k * x_k(t)   (optional; values supplied)
//
//   phase_s(t) = ((t mod P_s) / P_s), computed in integer microseconds so the
//   phase of a timestamp in 2026 is exact; t_ref is the time of the last update
//   (the level l is "now"); U is the trend unit (the memory duration).
//
// Fit: theta = (l, b, a_11, c_11, ...) minimises the weighted least-squares cost
//
//   J_n(theta) = sum_i w_i (y_i - x_i' theta)^2 + w_0 (theta - theta_0)' R_0 (theta -
//   theta_0) w_i = exp(-(t_n - t_i) / memory)        (forgetting measured in time) R_0 =
//   I / prior_variance                 (ridge prior, centred on theta_0)
//
// computed recursively (Ljung & Soederstroem 1983, "Theory and Practice of
// Recursive Identification", MIT Press, ch. 2; MEM) in covariance form, with
// lambda_n = exp(-(t_n - t_{n-1}) / memory):
//
//   re-centre: l += b * (t_n - t_ref)/U;  P = A P A'  with A = I + e_l e_b' (t_n -
//   t_ref)/U forget:    P = P / lambda_n;  P_ll += q (t_n - t_{n-1}) / unit   (level
//   noise, below) gain:      k = P x / (1 + x' P x) residual:  e = y - x' theta (one step
//   ahead: taken BEFORE the update) update:    theta += k e;  P -= k (P x)';  P = (P +
//   P')/2
//
// The re-centring is an exact reparametrisation, so the result equals the batch
// weighted least-squares fit above, with the prior term taken in the coordinates
// of the first reading's time (theta_1 = A^-1 theta_n, A = I + e_l e_b' (t_n - t_1)/U)
// and w_0 = exp(-(t_n - t_1) / memory) (tests/reference/forecaster_reference.py
// checks this with numpy to 1e-8). Numerical safeguards (common practice, no
// source): P is kept symmetric, lambda is floored at exp(-30) so a very long gap
// cannot overflow P, and P is kept bounded by
//
//   bound(t) = prior_variance / max(w_0(t), 0.01)
//
// -- a bounded-covariance guard against wind-up when a direction is not excited
// (e.g. a season whose period equals the sampling interval, or harmonics that
// alias at a regular spacing): when a diagonal element of P exceeds bound(t),
// P's eigenvalues are clamped at bound(t) / 2 (P = V min(L, bound/2) V'), which
// leaves the well-determined directions alone and keeps P positive definite;
// the half-way reset means the O(n^3) eigensolver runs about once per
// memory * ln 2 of wind-up, not at every reading. The exact fit has
// P_n <= (w_0 R_0)^-1 = I prior_variance / w_0, so the guard cannot act while
// w_0 >= 0.01 (the first 4.6 memories) and the WLS identity holds then
// exactly; later it acts only on directions the data have stopped exciting.
// (A bound of prior_variance itself would fire during start-up, before the data
// excite every direction, and bias the fit; a diagonal rescaling D P D would leak
// the unexcited variance into correlated, well-determined directions.) The
// bound is applied after the forgetting step as well as after the update, so a
// gap of many memories cannot feed a huge P / lambda into the update. In
// covariance form the first updates subtract numbers of size prior_variance,
// so a very large prior_variance costs digits: with y ~ 20 the difference from
// the exact fit is ~1e-12 at prior_variance 1e4 and ~1e-8 at 1e8.
//
// Level noise (optional, q = level_noise >= 0): the level may also wander as a
// random walk, l(t) = l(s) + eta with Var(eta) = q sigma^2 (t - s) / unit. This
// is the Kalman filter of a local level (plus trend and seasonal) structural
// model, with q its signal-to-noise ratio (Harvey 1989, "Forecasting, Structural
// Time Series Models and the Kalman Filter", ch. 2 and 3; Durbin & Koopman 2001,
// ch. 2; MEM): after forgetting, q (t_n - t_{n-1}) / unit is added to P_ll, so
// the level keeps learning from recent readings at a rate set by q while the
// seasonal coefficients keep their long memory. It suits series whose level
// moves by small lasting steps all the time (monthly sales, traffic), where a
// smooth trend would leave long runs of same-signed residuals. q = 0 (the
// default) is the plain weighted least-squares fit above; with q > 0 the WLS
// identity no longer holds. SeriesMonitor picks q per series from the data.
//
// Prediction variance: Var(y_new - yhat) = sigma^2 (1 + x' P x / lambda + q dt / unit),
// with P inflated for the time dt elapsed since the last update; ResidualScale
// supplies sigma.
//
// Choosing parameters: `memory` should span several of the longest season (the
// default is 4 x the longest season, and at least 50 x the typical spacing); more
// harmonics fit sharper seasonal shapes (a defrost spike needs 4-8, a smooth daily
// load 2-4) at the cost of O(n^2) work per reading, n = 2 + 2 sum J_s.
#pragma once

#include <string>
#include <vector>

#include "detectors/eigen_types.h"
#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

struct SeasonalForecasterOptions {
  std::vector<EventTime> seasons;  // periods, each > 0
  std::vector<int> harmonics;      // per season, each in [1, 24]; same length as seasons
  bool trend = true;               // include the local linear trend b
  EventTime memory = 28 * kMicrosPerDay;  // forgetting timescale, > 0
  double prior_variance = 1e8;  // variance of the ridge prior on each coefficient, > 0
  // Random-walk variance of the level per level_noise_unit of time, as a
  // multiple of the noise variance (the signal-to-noise ratio q), [0, 1000].
  double level_noise = 0.0;
  EventTime level_noise_unit = kMicrosPerDay;  // > 0
  static constexpr double kMaxLevelNoise = 1000.0;
  // Extra regressors whose values the caller supplies for each observation
  // (covariates: detectors/covariate.h), [0, kMaxCovariates].
  int covariates = 0;
  static constexpr int kMaxCovariates = 16;

  bool IsValid(std::string* why) const;
  // Default harmonics for a season period: sharper shapes for short periods.
  static int DefaultHarmonics(EventTime period);
};

// A prediction at some time: the expected value and the variance factor
// x' P x / lambda (multiply by sigma^2 and add sigma^2 for a predictive variance).
struct Forecast {
  double value = 0.0;
  double parameter_variance_factor = 0.0;
  // The same less what a level that wanders (level_noise) leaves in it for
  // good: q/2 + sqrt(q + q^2/4) for a drift q per reading, the steady state of
  // a random-walk level observed in unit noise (zero without level_noise). How
  // much the model has still to learn about its coefficients, in units of the
  // noise variance. Infinite before the first update.
  double unsettled_variance_factor = 0.0;
};

// y = P x for the symmetric n x n matrix P given by its lower triangle packed
// by columns (P(i, j), i >= j, at j n - j (j - 1) / 2 + i - j). Each y_i sums
// P(i, j) x_j over j in order from 0, as Eigen's column-major matrix-vector
// product does, so y is that of the full matrix bit for bit. x and y must not
// overlap.
void PackedSymmetricTimesVector(const double* lower, int n, const double* x, double* y);

// P += alpha u u' on the same packed triangle: column j gets (alpha u_j) times
// u_j..u_{n-1}, each entry one multiply and one add, as Eigen computes
// `column += (alpha * u[j]) * u.tail(n - j)`, bit for bit at every vector width.
void RankOneUpdatePacked(double* lower, int n, double alpha, const double* u);

class SeasonalForecaster {
 public:
  // Precondition: options.IsValid(). The model starts with no data; the first
  // Update sets theta_0 = (y_1, 0, ..., 0) and the prior.
  explicit SeasonalForecaster(const SeasonalForecasterOptions& options);

  // Starts loading the state an update touches into the caches (a hint only).
  void Prefetch() const;

  // Number of coefficients n.
  int dimension() const { return static_cast<int>(theta_.size()); }
  bool has_data() const { return updates_ > 0; }
  long long updates() const { return updates_; }
  EventTime last_time() const { return t_ref_; }
  EventTime first_time() const { return t_first_; }

  // Forecast at time t (t may be before the last update time; the trend then
  // runs backwards). Before any data: value 0, infinite variance factor.
  Forecast Predict(EventTime t) const;

  // Folds in reading y at time t >= last_time(). Returns the one-step-ahead
  // forecast made before the update. Fails, leaving the state untouched, when y
  // is not finite or t is earlier than the last update.
  StatusOr<Forecast> Update(EventTime t, double y);

  // Folds in the mean of the series over [from, to] (a bucket, or a meter's
  // consumption spread over the interval between two readings): the regressors
  // are averaged over the interval in closed form (for a Fourier pair,
  // mean cos(w t) over [a, b] = (sin(w b) - sin(w a)) / (w (b - a))), and the
  // forgetting clock advances to `to`. from == to is Update(to, mean).
  StatusOr<Forecast> UpdateInterval(EventTime from, EventTime to, double mean);
  // The forecast of the mean over [from, to].
  Forecast PredictInterval(EventTime from, EventTime to) const;

  // Two-phase update, for callers that need the one-step forecast before they
  // decide what to fold in (the monitor clips outliers): BeginUpdate advances
  // the model's clock to `to` (re-centre, forget) and returns the forecast of
  // the observation at `to` (the mean over [from, to] when from < to); before any
  // data it returns value 0 with an infinite variance factor. CommitUpdate then
  // folds in the observed value. Update(t, y) is BeginUpdate(t, t) followed by
  // CommitUpdate(y). BeginUpdate fails, changing nothing, when to is earlier
  // than the last update or from > to; CommitUpdate fails, changing nothing,
  // when y is not finite or no update is pending.
  StatusOr<Forecast> BeginUpdate(EventTime from, EventTime to);
  Status CommitUpdate(double y);
  // The forecast the last BeginUpdate made, of the observation over [from,
  // to], as it stood before that observation was folded in (the variance
  // factor as BeginUpdate's). For showing a reading's forecast once it is in;
  // meaningless unless the model had data before that update.
  struct Begun {
    EventTime from = 0, to = 0;
    double value = 0.0, parameter_variance_factor = 0.0;
  };
  Begun last_begun() const {
    return {pending_.from, pending_.to, pending_.forecast, pending_.xpx};
  }

  // Moves the level by delta (units of y) and adds level_variance to its
  // variance (at most up to half the covariance bound below), so the model
  // re-baselines fast after a detected change.
  void ShiftLevel(double delta, double level_variance);
  // Adds `variance` (in noise variances) to every coefficient's variance, so
  // the level, trend and seasonal shape re-learn from the next readings (a
  // planned change). Bounded like ShiftLevel; P stays positive definite.
  void Reopen(double variance);
  // The covariate regressors' values for the next Predict, BeginUpdate or
  // Update (held constant over an interval); `values` has options().covariates
  // entries. Until set they are 0.
  void SetCovariates(const double* values);
  // Sets the time unit of level_noise (the series' mean spacing, say); > 0.
  void SetLevelNoiseUnit(EventTime unit) {
    if (unit > 0) options_.level_noise_unit = unit;
  }
  // Checkpoints (detectors/snapshot.h): the state and the options a series
  // derives at run time (memory, level_noise, level_noise_unit). Load expects
  // a forecaster built with the same seasons, harmonics and trend.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

  const Vector& coefficients() const { return theta_; }
  Matrix covariance() const;  // unpacked
  const SeasonalForecasterOptions& options() const { return options_; }

 private:
  void FillRegressors(EventTime t, Vector* x) const;
  // Level random-walk variance (in noise variances) accrued over `elapsed`.
  double LevelDrift(EventTime elapsed) const;
  void FillIntervalRegressors(EventTime from, EventTime to, Vector* x) const;
  StatusOr<Forecast> UpdateWith(EventTime t, double y, bool interval, EventTime from);

  // The update begun by BeginUpdate and not yet committed.
  struct Pending {
    bool active = false;
    EventTime from = 0, to = 0;
    double forecast = 0.0;  // x' theta at `to`
    double xpx = 0.0;       // x' P x after forgetting
  };
  Pending pending_;
  void Recentre(EventTime t);
  // The bounded-covariance guard (see the header comment).
  double CovarianceBound(EventTime t) const;
  void BoundCovariance(EventTime t);
  // P whole, in this thread's workspace for the dimension (valid until the
  // next Unpacked of a forecaster of that dimension on this thread).
  Matrix& Unpacked() const;
  // Keeps p's lower triangle as P.
  void Pack(const Matrix& p);
  double& Diagonal(int i);  // P(i, i) in the packed triangle
  double LargestVariance() const;

  // The guard lets the prior's weight decay to this fraction, no further.
  static constexpr double kPriorWeightFloor = 0.01;
  // It acts when a diagonal element exceeds the bound by more than this
  // (relative) margin, and then clamps P's eigenvalues at kBoundReset * bound.
  static constexpr double kBoundMargin = 1e-9;
  static constexpr double kBoundReset = 0.5;
  // lambda is never smaller than exp(-kMaxForgettingExponent).
  static constexpr double kMaxForgettingExponent = 30.0;

  SeasonalForecasterOptions options_;
  std::vector<EventTime> periods_;  // one entry per season
  std::vector<int> harmonics_;
  Vector covariate_values_;
  Vector theta_;
  // P, symmetric, as its lower triangle packed by columns (d (d + 1) / 2
  // values: 1.7 KB rather than 3.2 KB at d = 20, per series).
  Vector p_lower_;
  mutable Vector x_;  // scratch regressor, sized once
  Vector px_;         // scratch P x
  EventTime t_ref_ = 0;
  EventTime t_first_ = 0;  // time of the first update (the prior's time)
  long long updates_ = 0;
};

}  // namespace plumbline
