#include "detectors/seasonal_forecaster.h"

#include <Eigen/Eigenvalues>
#include <algorithm>
#include <cmath>
#include <cstddef>
#include <cstring>
#include <limits>
#include <numbers>

#include "detectors/prefetch.h"

namespace plumbline {
namespace {

// A function built once per instruction set (AVX-512, AVX2, the baseline), the
// widest the processor has being chosen at load time. Fused multiply-add is off in
// every copy: it rounds once where a multiply and an add round twice, so the
// copies would differ from the baseline build (and from Eigen's code) in the
// last bits. Not under ThreadSanitizer: the clones' resolver runs while the
// program is being relocated, before the sanitizer's runtime has started, and
// its instrumented code crashes there.
#if defined(__x86_64__) && defined(__GNUC__) && !defined(__SANITIZE_THREAD__)
#define PLUMBLINE_WIDEST_VECTORS \
  __attribute__((target_clones("avx512f", "avx2", "default"), optimize("fp-contract=off")))
#else
#define PLUMBLINE_WIDEST_VECTORS
#endif

// Divides each of `count` values by `divisor` in place, on the widest vectors.
// Division is correctly rounded at every width, so every copy gives the same
// bits; on the baseline x86-64 build, two lanes at a time, the n^2 divisions of
// the forgetting step were the costliest part of an update (about 40% of it
// for n = 20, by perf).
PLUMBLINE_WIDEST_VECTORS
void DivideAll(double* values, std::size_t count, double divisor) {
  typedef double Lanes __attribute__((vector_size(64)));
  constexpr std::size_t kLanes = sizeof(Lanes) / sizeof(double);
  Lanes divisors;
  for (std::size_t lane = 0; lane < kLanes; ++lane) divisors[lane] = divisor;
  std::size_t i = 0;
  for (; i + kLanes <= count; i += kLanes) {
    Lanes v;
    std::memcpy(&v, values + i, sizeof v);
    v /= divisors;
    std::memcpy(values + i, &v, sizeof v);
  }
  for (; i < count; ++i) values[i] /= divisor;
}

// Full-matrix workspaces of the covariance, one per dimension and thread: P
// rests packed in each forecaster and is unpacked here for the update's
// matrix products, so the arithmetic is the full matrix's, bit for bit.
Matrix& CovarianceWorkspace(int n) {
  thread_local std::vector<Matrix> by_dimension;
  if (static_cast<int>(by_dimension.size()) <= n) by_dimension.resize(n + 1);
  Matrix& p = by_dimension[static_cast<std::size_t>(n)];
  if (p.rows() != n) p.resize(n, n);
  return p;
}

// x' P x from the packed lower triangle in one pass, for forecasts away from
// an update (Predict, PredictInterval): no unpacked copy of P and no full
// matrix product (those took a tenth of `serve`'s time when every reading's
// chart point made its own forecast; perf, 1,000 series at 250,000 readings
// a second).
double PackedQuadraticForm(const double* lower, int n, const double* x) {
  double sum = 0.0;
  for (int j = 0; j < n; lower += n - j, ++j) {  // column j: P(j..n-1, j)
    double off_diagonal = 0.0;
    for (int i = j + 1; i < n; ++i) off_diagonal += lower[i - j] * x[i];
    sum += x[j] * (lower[0] * x[j] + 2.0 * off_diagonal);
  }
  return sum;
}

}  // namespace

PLUMBLINE_WIDEST_VECTORS
void PackedSymmetricTimesVector(const double* lower, int n, const double* x, double* y) {
  // Row by row, each y_i in its own accumulator: terms j < i come from row i
  // of the triangle (one entry per column), terms j >= i from column i, in that
  // order. Four rows at a time give the processor four independent sums (one
  // vector of four where it has them). Plain multiply then add in every copy
  // (PLUMBLINE_WIDEST_VECTORS), so each sum rounds as Eigen's does.
  int i = 0;
  for (; i + 4 <= n; i += 4) {
    double a0 = 0.0, a1 = 0.0, a2 = 0.0, a3 = 0.0;
    const double* c = lower;
    for (int j = 0; j < i; c += n - j, ++j) {  // P(i + r, j) at column j, row i + r
      const double* e = c + (i - j);
      const double xj = x[j];
      a0 += e[0] * xj;
      a1 += e[1] * xj;
      a2 += e[2] * xj;
      a3 += e[3] * xj;
    }
    // The 4 x 4 diagonal block: P(i + r, i + q) is in column i + min(r, q).
    const double* c0 = c;
    const double* c1 = c0 + (n - i);
    const double* c2 = c1 + (n - i - 1);
    const double* c3 = c2 + (n - i - 2);
    a0 += c0[0] * x[i];
    a1 += c0[1] * x[i];
    a2 += c0[2] * x[i];
    a3 += c0[3] * x[i];
    a0 += c0[1] * x[i + 1];
    a1 += c1[0] * x[i + 1];
    a2 += c1[1] * x[i + 1];
    a3 += c1[2] * x[i + 1];
    a0 += c0[2] * x[i + 2];
    a1 += c1[1] * x[i + 2];
    a2 += c2[0] * x[i + 2];
    a3 += c2[1] * x[i + 2];
    a0 += c0[3] * x[i + 3];
    a1 += c1[2] * x[i + 3];
    a2 += c2[1] * x[i + 3];
    a3 += c3[0] * x[i + 3];
    for (int j = i + 4; j < n; ++j) {  // P(i + r, j) = P(j, i + r), in column i + r
      const double xj = x[j];
      a0 += c0[j - i] * xj;
      a1 += c1[j - i - 1] * xj;
      a2 += c2[j - i - 2] * xj;
      a3 += c3[j - i - 3] * xj;
    }
    y[i] = a0;
    y[i + 1] = a1;
    y[i + 2] = a2;
    y[i + 3] = a3;
  }
  for (; i < n; ++i) {
    double a = 0.0;
    const double* c = lower;
    for (int j = 0; j < i; c += n - j, ++j) a += c[i - j] * x[j];
    for (int j = i; j < n; ++j) a += c[j - i] * x[j];  // c: column i now
    y[i] = a;
  }
}

// On the widest vectors (PLUMBLINE_WIDEST_VECTORS): each value is one multiply and one
// add, in that order, whatever the width, so every copy gives the baseline
// build's bits.
PLUMBLINE_WIDEST_VECTORS
void RankOneUpdatePacked(double* lower, int n, double alpha, const double* u) {
  typedef double Lanes __attribute__((vector_size(32)));
  constexpr int kLanes = static_cast<int>(sizeof(Lanes) / sizeof(double));
  double* column = lower;
  for (int i = 0; i < n; column += n - i, ++i) {
    const double scale = alpha * u[i];
    Lanes scales;
    for (int lane = 0; lane < kLanes; ++lane) scales[lane] = scale;
    const double* tail = u + i;
    const int length = n - i;
    int k = 0;
    for (; k + kLanes <= length; k += kLanes) {
      Lanes c, t;
      std::memcpy(&c, column + k, sizeof c);
      std::memcpy(&t, tail + k, sizeof t);
      c += scales * t;
      std::memcpy(column + k, &c, sizeof c);
    }
    for (; k < length; ++k) column[k] += scale * tail[k];
  }
}

bool SeasonalForecasterOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why) *why = message;
    return false;
  };
  if (harmonics.size() != seasons.size()) {
    return fail("harmonics must give one count per season");
  }
  for (EventTime period : seasons) {
    if (period <= 0) return fail("seasons must be positive durations");
  }
  for (int h : harmonics) {
    if (h < 1 || h > 24) return fail("harmonics must each be in [1, 24]");
  }
  if (memory <= 0) return fail("memory must be a positive duration");
  if (!(prior_variance > 0 && std::isfinite(prior_variance))) {
    return fail("prior_variance must be finite and > 0");
  }
  if (!(level_noise >= 0 && level_noise <= kMaxLevelNoise)) {
    return fail("level_noise must be in [0, 1000]");
  }
  if (level_noise_unit <= 0) return fail("level_noise_unit must be a positive duration");
  if (covariates < 0 || covariates > kMaxCovariates) {
    return fail("covariates must number at most 16");
  }
  return true;
}

int SeasonalForecasterOptions::DefaultHarmonics(EventTime period) {
  // Common practice, no source: enough harmonics for sharp intraday shapes,
  // few for long smooth cycles where they would mostly fit noise.
  if (period <= 12 * kMicrosPerHour) return 6;
  if (period <= 2 * kMicrosPerDay) return 6;
  if (period <= 31 * kMicrosPerDay) return 3;
  return 4;
}

SeasonalForecaster::SeasonalForecaster(const SeasonalForecasterOptions& options)
    : options_(options), periods_(options.seasons), harmonics_(options.harmonics) {
  int n = 2;
  for (int h : harmonics_) n += 2 * h;
  n += options_.covariates;
  covariate_values_ = Vector::Zero(options_.covariates);
  theta_ = Vector::Zero(n);
  Pack(Matrix::Identity(n, n) * options_.prior_variance);
  x_ = Vector::Zero(n);
  px_ = Vector::Zero(n);
}

void SeasonalForecaster::FillRegressors(EventTime t, Vector* x) const {
  Vector& r = *x;
  r[0] = 1.0;
  r[1] = options_.trend
             ? static_cast<double>(t - t_ref_) / static_cast<double>(options_.memory)
             : 0.0;
  int i = 2;
  for (size_t s = 0; s < periods_.size(); ++s) {
    EventTime within = t % periods_[s];
    if (within < 0) within += periods_[s];
    const double angle = 2.0 * std::numbers::pi * static_cast<double>(within) /
                         static_cast<double>(periods_[s]);
    const double c1 = std::cos(angle), s1 = std::sin(angle);
    double c = c1, sn = s1;
    for (int j = 0; j < harmonics_[s]; ++j) {
      r[i++] = c;
      r[i++] = sn;
      const double next_c = c * c1 - sn * s1;  // angle addition: harmonic j+1
      sn = sn * c1 + c * s1;
      c = next_c;
    }
  }
  r.tail(options_.covariates) = covariate_values_;
}

void SeasonalForecaster::SetCovariates(const double* values) {
  for (int k = 0; k < options_.covariates; ++k) covariate_values_[k] = values[k];
}

void SeasonalForecaster::FillIntervalRegressors(EventTime from, EventTime to,
                                                Vector* x) const {
  if (to <= from) {
    FillRegressors(to, x);
    return;
  }
  Vector& r = *x;
  r[0] = 1.0;
  // The trend is linear, so its mean over the interval is its value at the midpoint.
  r[1] = options_.trend ? (0.5 * static_cast<double>(from - t_ref_) +
                           0.5 * static_cast<double>(to - t_ref_)) /
                              static_cast<double>(options_.memory)
                        : 0.0;
  int i = 2;
  for (size_t s = 0; s < periods_.size(); ++s) {
    const EventTime period = periods_[s];
    EventTime a = from % period;
    if (a < 0) a += period;
    const double length = static_cast<double>(to - from);  // may span many periods
    const double angle_a =
        2.0 * std::numbers::pi * static_cast<double>(a) / static_cast<double>(period);
    const double span = 2.0 * std::numbers::pi * length / static_cast<double>(period);
    for (int j = 1; j <= harmonics_[s]; ++j) {
      // (sin(w b) - sin(w a)) / (w (b - a)) = cos(w m) sin(h) / h and
      // (cos(w a) - cos(w b)) / (w (b - a)) = sin(w m) sin(h) / h, with m the
      // midpoint and h = w (b - a) / 2: no cancellation for short intervals.
      const double half = 0.5 * j * span;
      const double middle = j * angle_a + half;
      const double sinc = std::sin(half) / half;
      r[i++] = std::cos(middle) * sinc;
      r[i++] = std::sin(middle) * sinc;
    }
  }
  r.tail(options_.covariates) = covariate_values_;
}

Forecast SeasonalForecaster::PredictInterval(EventTime from, EventTime to) const {
  if (updates_ == 0) return {0.0, std::numeric_limits<double>::infinity()};
  FillIntervalRegressors(from, to, &x_);
  const double lambda =
      std::exp(-static_cast<double>(std::max<EventTime>(to - t_ref_, 0)) /
               static_cast<double>(options_.memory));
  return {x_.dot(theta_),
          PackedQuadraticForm(p_lower_.data(), dimension(), x_.data()) / lambda +
              x_[0] * x_[0] * LevelDrift(to - t_ref_)};
}

Forecast SeasonalForecaster::Predict(EventTime t) const { return PredictInterval(t, t); }

Matrix& SeasonalForecaster::Unpacked() const {
  const int n = dimension();
  Matrix& p = CovarianceWorkspace(n);
  const double* packed = p_lower_.data();
  for (int j = 0; j < n; packed += n - j, ++j) {
    std::memcpy(&p(j, j), packed, sizeof(double) * static_cast<std::size_t>(n - j));
  }
  p.triangularView<Eigen::StrictlyUpper>() = p.transpose();
  return p;
}

void SeasonalForecaster::Pack(const Matrix& p) {
  const int n = static_cast<int>(p.rows());
  p_lower_.resize(n * (n + 1) / 2);
  double* packed = p_lower_.data();
  for (int j = 0; j < n; ++j) {
    for (int i = j; i < n; ++i, ++packed) *packed = p(i, j);
  }
}

double& SeasonalForecaster::Diagonal(int i) {
  // Column j of the packed lower triangle starts at j n - j (j - 1) / 2.
  return p_lower_[i * dimension() - i * (i - 1) / 2];
}

double SeasonalForecaster::LargestVariance() const {
  const int n = dimension();
  double largest = p_lower_[0];
  const double* diagonal = p_lower_.data();
  for (int i = 1; i < n; ++i) largest = std::max(largest, *(diagonal += n - i + 1));
  return largest;
}

Matrix SeasonalForecaster::covariance() const { return Unpacked(); }

void SeasonalForecaster::Recentre(EventTime t) {
  if (!options_.trend || t == t_ref_) {
    t_ref_ = t;
    return;
  }
  const double d = static_cast<double>(t - t_ref_) / static_cast<double>(options_.memory);
  // theta' = A theta, P' = A P A' with A = I + d e_0 e_1': row 0 += d row 1,
  // then column 0 += d column 1, which on the lower triangle is
  // P00 = (P00 + d P10) + d (P10 + d P11) and Pi0 += d Pi1 for i >= 1 (P11
  // the diagonal), in the full matrix's order of operations.
  theta_[0] += d * theta_[1];
  const int n = dimension();
  double* column0 = p_lower_.data();
  const double* column1 = column0 + n;  // from P11
  column0[0] = (column0[0] + d * column0[1]) + d * (column0[1] + d * column1[0]);
  for (int i = 1; i < n; ++i) column0[i] += d * column1[i - 1];
  t_ref_ = t;
}

StatusOr<Forecast> SeasonalForecaster::Update(EventTime t, double y) {
  return UpdateWith(t, y, false, t);
}

StatusOr<Forecast> SeasonalForecaster::UpdateInterval(EventTime from, EventTime to,
                                                      double mean) {
  if (from > to) return Status::InvalidArgument("interval ends before it starts");
  return UpdateWith(to, mean, from < to, from);
}

StatusOr<Forecast> SeasonalForecaster::UpdateWith(EventTime t, double y, bool interval,
                                                  EventTime from) {
  if (!std::isfinite(y)) return Status::InvalidArgument("reading value is not finite");
  StatusOr<Forecast> begun = BeginUpdate(interval ? from : t, t);
  if (!begun.ok()) return begun;
  const bool first = updates_ == 0;
  Status committed = CommitUpdate(y);
  if (!committed.ok()) return committed;
  // The first update's forecast is the prior's, centred on the reading itself.
  if (first) return Forecast{y, pending_.xpx, std::numeric_limits<double>::infinity()};
  return begun;
}

StatusOr<Forecast> SeasonalForecaster::BeginUpdate(EventTime from, EventTime to) {
  if (from > to) return Status::InvalidArgument("interval ends before it starts");
  if (updates_ > 0 && to < t_ref_) {
    return Status::OutOfRange("reading is earlier than the forecaster's last update");
  }
  pending_ = Pending{true, from, to, 0.0, std::numeric_limits<double>::infinity()};
  if (updates_ == 0) {
    return Forecast{0.0, std::numeric_limits<double>::infinity(),
                    std::numeric_limits<double>::infinity()};
  }
  // Past kMaxForgettingExponent memories the old information is gone to double
  // precision anyway; the clamp keeps P / lambda finite after a very long gap.
  const double lambda = std::exp(
      -std::min(static_cast<double>(to - t_ref_) / static_cast<double>(options_.memory),
                kMaxForgettingExponent));
  const EventTime elapsed = to - t_ref_;
  Recentre(to);
  DivideAll(p_lower_.data(), static_cast<std::size_t>(p_lower_.size()), lambda);
  Diagonal(0) += LevelDrift(elapsed);
  // Bounding before the update as well keeps a long gap's huge P / lambda out
  // of the rank-one downdate (it would leave P with a condition number ~1e16).
  BoundCovariance(to);
  if (from < to) {
    FillIntervalRegressors(from, to, &x_);
  } else {
    FillRegressors(to, &x_);
  }
  PackedSymmetricTimesVector(p_lower_.data(), dimension(), x_.data(), px_.data());
  pending_.xpx = x_.dot(px_);
  pending_.forecast = x_.dot(theta_);
  // The Kalman filter's steady state for a random-walk level with drift q in
  // unit noise: predicted variance q/2 + sqrt(q + q^2/4) (Harvey 1989, section
  // 4.1, the local level model; MEM).
  const double q = LevelDrift(elapsed);
  const double floor = q > 0 ? 0.5 * q + std::sqrt(q + 0.25 * q * q) : 0.0;
  return Forecast{pending_.forecast, pending_.xpx, std::max(pending_.xpx - floor, 0.0)};
}

void SeasonalForecaster::Prefetch() const {
  PrefetchRange(theta_.data(), sizeof(double) * static_cast<std::size_t>(theta_.size()));
  PrefetchRange(p_lower_.data(), sizeof(double) * static_cast<std::size_t>(p_lower_.size()));
  PrefetchRange(x_.data(), sizeof(double) * static_cast<std::size_t>(x_.size()));
  PrefetchRange(px_.data(), sizeof(double) * static_cast<std::size_t>(px_.size()));
}

Status SeasonalForecaster::CommitUpdate(double y) {
  if (!std::isfinite(y)) return Status::InvalidArgument("reading value is not finite");
  if (!pending_.active) return Status::FailedPrecondition("no update has been begun");
  const EventTime t = pending_.to;
  if (updates_ == 0) {
    t_ref_ = t;
    t_first_ = t;
    theta_.setZero();
    theta_[0] = y;
    Pack(Matrix::Identity(dimension(), dimension()) * options_.prior_variance);
    BoundCovariance(t);
    if (pending_.from < t) {
      FillIntervalRegressors(pending_.from, t, &x_);
    } else {
      FillRegressors(t, &x_);
    }
    PackedSymmetricTimesVector(p_lower_.data(), dimension(), x_.data(), px_.data());
    pending_.xpx = x_.dot(px_);
    pending_.forecast = x_.dot(theta_);
  }
  const double error = y - pending_.forecast;
  const double denominator = 1.0 + pending_.xpx;
  theta_.noalias() += px_ * (error / denominator);
  // Rank-one downdate of the packed lower triangle, P += alpha u u' with
  // u = P x (rounding as Eigen's). P stays exactly symmetric. Bounded as well.
  RankOneUpdatePacked(p_lower_.data(), dimension(), -1.0 / denominator, px_.data());
  BoundCovariance(t);
  ++updates_;
  pending_.active = false;
  return Status::Ok();
}

double SeasonalForecaster::CovarianceBound(EventTime t) const {
  // prior_variance / max(w_0(t), kPriorWeightFloor), w_0(t) = exp(-(t - t_1) / memory).
  const double age =
      static_cast<double>(t - t_first_) / static_cast<double>(options_.memory);
  return options_.prior_variance *
         std::exp(std::clamp(age, 0.0, -std::log(kPriorWeightFloor)));
}

void SeasonalForecaster::BoundCovariance(EventTime t) {
  const double bound = CovarianceBound(t);
  // The margin keeps rounding (P_ii a few ulps above an exactly-met bound) from
  // triggering the guard while the fit is still the exact one.
  if (!(LargestVariance() > bound * (1.0 + kBoundMargin))) return;
  Matrix& p = Unpacked();
  // Clamp the eigenvalues rather than rescale rows and columns: a diagonal
  // rescaling D P D of directions that are correlated with well-determined ones
  // (a season aliased with the level) leaks their huge variance into the
  // well-determined combinations, and the fit turns noisy.
  Eigen::SelfAdjointEigenSolver<Matrix> eigen(p);
  const Vector clamped = eigen.eigenvalues().cwiseMin(kBoundReset * bound);
  p.noalias() =
      eigen.eigenvectors() * clamped.asDiagonal() * eigen.eigenvectors().transpose();
  Pack(p);
}

void SeasonalForecaster::Reopen(double variance) {
  const double ceiling = kBoundReset * CovarianceBound(t_ref_);
  for (int i = 0; i < dimension(); ++i) {
    Diagonal(i) += std::clamp(variance, 0.0, std::max(ceiling - Diagonal(i), 0.0));
  }
}

double SeasonalForecaster::LevelDrift(EventTime elapsed) const {
  if (options_.level_noise == 0 || elapsed <= 0) return 0.0;
  return options_.level_noise * static_cast<double>(elapsed) /
         static_cast<double>(options_.level_noise_unit);
}

void SeasonalForecaster::ShiftLevel(double delta, double level_variance) {
  theta_[0] += delta;
  // Adding to a diagonal element keeps P positive definite. The addition stops
  // at half the covariance bound, so the guard has nothing to do.
  const double room = kBoundReset * CovarianceBound(t_ref_) - Diagonal(0);
  Diagonal(0) += std::clamp(level_variance, 0.0, std::max(room, 0.0));
}

void SeasonalForecaster::Save(SnapshotWriter& w) const {
  w.Tag("FCST");
  w.I64(options_.memory);
  w.F64(options_.level_noise);
  w.I64(options_.level_noise_unit);
  w.U64(static_cast<std::uint64_t>(theta_.size()));
  w.Doubles(theta_.data(), static_cast<std::size_t>(theta_.size()));
  const Matrix& p = Unpacked();  // saved whole: the format predates packing
  w.Doubles(p.data(), static_cast<std::size_t>(p.size()));
  w.I64(t_ref_);
  w.I64(t_first_);
  w.I64(updates_);
  w.Bool(pending_.active);
  w.I64(pending_.from);
  w.I64(pending_.to);
  w.F64(pending_.forecast);
  w.F64(pending_.xpx);
}

Status SeasonalForecaster::Load(SnapshotReader& r) {
  r.Tag("FCST");
  options_.memory = r.Time("forecaster memory");
  options_.level_noise = r.NonNegative("forecaster level noise");
  options_.level_noise_unit = r.Time("forecaster level noise unit");
  const std::uint64_t n = r.U64();
  if (!r.ok()) return r.status();
  if (n != static_cast<std::uint64_t>(theta_.size())) {
    return r.Fail("forecaster has " + std::to_string(n) + " coefficients, this one " +
                  std::to_string(theta_.size()));
  }
  if (options_.memory <= 0 || options_.level_noise_unit <= 0) {
    return r.Fail("forecaster memory or level noise unit not positive");
  }
  if (options_.level_noise > SeasonalForecasterOptions::kMaxLevelNoise) {
    return r.Fail("forecaster level noise above its range");
  }
  r.FiniteDoubles(theta_.data(), static_cast<std::size_t>(theta_.size()),
                  "forecaster coefficient");
  Matrix& p = CovarianceWorkspace(dimension());
  r.FiniteDoubles(p.data(), static_cast<std::size_t>(p.size()), "forecaster covariance");
  t_ref_ = r.Time("forecaster last time");
  t_first_ = r.Time("forecaster first time");
  updates_ = r.Counter("forecaster updates");
  pending_.active = r.Bool();
  pending_.from = r.Time("forecaster pending start");
  pending_.to = r.Time("forecaster pending end");
  pending_.forecast = r.Finite("forecaster pending forecast");
  pending_.xpx = r.F64();  // infinite while the prior is not yet set
  if (!r.ok()) return r.status();
  // A covariance has a non-negative diagonal; a negative variance would make
  // x' P x negative and the forecast's spread the square root of it. It is
  // symmetric (the updates keep it so bit for bit), and only its lower
  // triangle is kept.
  for (int i = 0; i < dimension(); ++i) {
    if (p(i, i) < 0) {
      return r.Fail("forecaster variance of coefficient " + std::to_string(i) +
                    " is negative");
    }
  }
  if (p != p.transpose()) return r.Fail("forecaster covariance is not symmetric");
  Pack(p);
  if (t_first_ > t_ref_) return r.Fail("forecaster first time is after its last");
  if (!(pending_.xpx >= 0) || (updates_ > 0 && !std::isfinite(pending_.xpx))) {
    return r.Fail("forecaster pending variance factor out of range");
  }
  if (pending_.active && pending_.from > pending_.to) {
    return r.Fail("forecaster pending interval ends before it starts");
  }
  return r.status();
}

}  // namespace plumbline
