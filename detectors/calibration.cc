#include "detectors/calibration.h"

#include <algorithm>
#include <cmath>
#include <limits>
#include <numbers>
#include <string>
#include <utility>
#include <vector>

#include "detectors/eigen_types.h"
#include "detectors/random.h"

namespace plumbline {
namespace {

#include "detectors/threshold_tables.inc"

// ------------------------------------------------------------ numerics ----

// Upper tail Q(x) = 1 - Phi(x), accurate in both tails.
double UpperTail(double x) { return 0.5 * std::erfc(x / std::sqrt(2.0)); }
double NormalCdf(double x) { return 0.5 * std::erfc(-x / std::sqrt(2.0)); }

// Phi(b) - Phi(a) for a <= b, computed in whichever tail keeps its digits.
double NormalMass(double a, double b) {
  if (b <= a) return 0.0;
  if (a >= 0.0) return UpperTail(a) - UpperTail(b);
  return NormalCdf(b) - NormalCdf(a);
}

// Inverse of the upper tail, Q(z) = p for 0 < p < 1: Newton's method kept
// inside a shrinking bracket (bisection when a step would leave it).
double UpperTailInverse(double p) {
  double lo = -40.0, hi = 40.0, z = 0.0;
  for (int i = 0; i < 300; ++i) {
    const double q = UpperTail(z) - p;
    if (q > 0.0)
      lo = z;
    else
      hi = z;
    const double density = std::exp(-0.5 * z * z) / std::sqrt(2.0 * std::numbers::pi);
    double next = density > 0.0 ? z + q / density : 0.5 * (lo + hi);
    if (!(next > lo && next < hi)) next = 0.5 * (lo + hi);
    if (std::abs(next - z) < 1e-14 * std::max(1.0, std::abs(z))) return next;
    z = next;
  }
  return z;
}

// Moves of a standard normal step beyond this many sd (probability < 1e-17)
// are dropped from the chains; this is what makes them banded.
constexpr double kTailCutoff = 8.5;

// Solves A x = 1 for the n x n band matrix A = I - R with lower bandwidth p and
// upper bandwidth q, stored row-major as band(i, j - i + p). A is row
// diagonally dominant (each row of R sums to at most 1), a property Gaussian
// elimination preserves, so no pivoting is needed and L and U stay in the band.
using BandMatrix = Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>;

Vector SolveBandedOnes(BandMatrix& band, int p, int q) {
  const int n = static_cast<int>(band.rows());
  Vector x = Vector::Ones(n);
  for (int pivot = 0; pivot < n; ++pivot) {
    const double diagonal = band(pivot, p);
    const int last_row = std::min(n - 1, pivot + p);
    const int last_col = std::min(n - 1, pivot + q);
    for (int i = pivot + 1; i <= last_row; ++i) {
      double& entry = band(i, pivot - i + p);
      if (entry == 0.0) continue;
      const double factor = entry / diagonal;
      entry = 0.0;
      // Row i, columns pivot+1..last_col: offsets j - i + p.
      double* row_i = &band(i, 0) + (p - i);
      const double* row_pivot = &band(pivot, 0) + (p - pivot);
      for (int j = pivot + 1; j <= last_col; ++j) row_i[j] -= factor * row_pivot[j];
      x(i) -= factor * x(pivot);
    }
  }
  for (int i = n - 1; i >= 0; --i) {
    const double* row_i = &band(i, 0) + (p - i);
    double sum = x(i);
    const int last_col = std::min(n - 1, i + q);
    for (int j = i + 1; j <= last_col; ++j) sum -= row_i[j] * x(j);
    x(i) = sum / row_i[i];
  }
  return x;
}

// ---------------------------------------------------------- CUSUM chain ----

constexpr double kCusumCellWidth = 0.2;  // coarse chain's cell width, sd
constexpr int kCusumMinCells = 40;       // coarse chain's minimum cell count
constexpr int kCusumMaxCells = 200000;   // refuse chains beyond this (h > 40000 sd)

int CusumCells(double h) {
  return std::max(kCusumMinCells, static_cast<int>(std::ceil(h / kCusumCellWidth)));
}

// One-sided (upper) CUSUM S = max(0, S + x - k), x ~ N(mu, 1), signal S > h,
// started at s in [0, h]: ARL from a chain of an atom at 0 plus m cells.
double UpperCusumChain(double k, double h, double mu, double s, int m) {
  const double w = h / m;
  const double a = k - mu;  // S moves by x - k = N(-a, 1)
  const int n = m + 1;      // state 0 is the atom, states 1..m the cells
  // Bandwidths in states: a move down by more than (kTailCutoff + a) or up by
  // more than (kTailCutoff - a) sd is dropped.
  const auto band_of = [&](double reach) {
    return std::clamp(static_cast<int>(std::ceil(std::max(0.0, reach) / w + 1.0)), 1, m);
  };
  const int p = band_of(kTailCutoff + a);
  const int q = band_of(kTailCutoff - a);
  BandMatrix band = BandMatrix::Zero(n, p + q + 1);
  // Cell-to-cell moves depend only on d = j - i: T(d) = mass of the increment in
  // ((d - 1/2) w, (d + 1/2) w] (shifted by -a).
  std::vector<double> toeplitz(p + q + 1);
  for (int d = -p; d <= q; ++d) {
    toeplitz[d + p] = NormalMass((d - 0.5) * w + a, (d + 0.5) * w + a);
  }
  // Row 0, from the atom: to zero Phi(a), to cell j mass in ((j-1) w, j w].
  band(0, p) = UpperTail(a);
  for (int j = 1; j <= std::min(m, q); ++j) {
    band(0, j + p) = -NormalMass((j - 1) * w + a, j * w + a);
  }
  for (int i = 1; i < n; ++i) {
    const int first = std::max(1, i - p);
    const int last = std::min(m, i + q);
    for (int j = first; j <= last; ++j) {
      band(i, j - i + p) = (i == j ? 1.0 : 0.0) - toeplitz[j - i + p];
    }
    if (i <= p) band(i, p - i) -= NormalCdf(a - (i - 0.5) * w);  // to zero
  }
  const Vector arl = SolveBandedOnes(band, p, q);
  if (s <= 0.0) return arl(0);
  // From s: one step of the exact kernel into the chain's states.
  double result = 1.0 + NormalCdf(a - s) * arl(0);
  const int first = std::max(1, static_cast<int>(std::floor((s - a - kTailCutoff) / w)));
  const int last =
      std::min(m, static_cast<int>(std::ceil((s - a + kTailCutoff) / w)) + 1);
  for (int j = first; j <= last; ++j) {
    result += NormalMass((j - 1) * w - s + a, j * w - s + a) * arl(j);
  }
  return result;
}

// Richardson-extrapolated one-sided ARL.
double UpperCusumArl(double k, double h, double mu, double s) {
  const int m = CusumCells(h);
  const double coarse = UpperCusumChain(k, h, mu, s, m);
  const double fine = UpperCusumChain(k, h, mu, s, 2 * m);
  return (4.0 * fine - coarse) / 3.0;
}

double TwoSidedCusumArl(double k, double h, double mu, double s) {
  const double up0 = UpperCusumArl(k, h, mu, 0.0);
  const double down0 = mu == 0.0 ? up0 : UpperCusumArl(k, h, -mu, 0.0);  // mirror image
  if (s <= 0.0) return 1.0 / (1.0 / up0 + 1.0 / down0);
  const double up_s = UpperCusumArl(k, h, mu, s);
  const double down_s = mu == 0.0 ? up_s : UpperCusumArl(k, h, -mu, s);
  return (up_s * down0 + down_s * up0 - up0 * down0) / (up0 + down0);
}

Status CheckCusumArguments(double k, double h, double shift, double headstart,
                           int sides) {
  if (!(std::isfinite(k) && k > 0.0))
    return Status::InvalidArgument("k must be finite and > 0");
  if (!(std::isfinite(h) && h > 0.0))
    return Status::InvalidArgument("h must be finite and > 0");
  if (!(std::isfinite(shift) && std::abs(shift) <= 20.0)) {
    return Status::InvalidArgument("shift must be finite with |shift| <= 20");
  }
  if (!(std::isfinite(headstart) && headstart >= 0.0 && headstart < h)) {
    return Status::InvalidArgument("headstart must be in [0, h)");
  }
  if (sides != 1 && sides != 2) return Status::InvalidArgument("sides must be 1 or 2");
  if (2.0 * CusumCells(h) > kCusumMaxCells) {
    return Status::OutOfRange("h = " + std::to_string(h) +
                              " needs more Markov-chain cells than the limit of 200000");
  }
  return Status::Ok();
}

double SiegmundOneSided(double drift, double b) {
  const double x = 2.0 * drift * b;
  if (std::abs(x) < 1e-4) {
    // exp(-x) + x - 1 = x^2/2 - x^3/6 + x^4/24 - ...; divided by 2 drift^2 = x^2 / (2
    // b^2).
    return b * b * (1.0 - x / 3.0 + x * x / 12.0);
  }
  return (std::expm1(-x) + x) / (2.0 * drift * drift);
}

// The h at which Siegmund's two-sided in-control ARL, with drift -k on
// either side, equals arl0 (bisection; a starting guess for the chain).
double SiegmundInControlH(double k, double arl0) {
  double lo = 0.0, hi = 1.0;
  const auto arl = [k](double h) { return 0.5 * SiegmundOneSided(-k, h + 1.166); };
  while (arl(hi) < arl0 && hi < 1e7) hi *= 2.0;
  for (int i = 0; i < 100 && hi - lo > 1e-6 * hi; ++i) {
    const double mid = 0.5 * (lo + hi);
    (arl(mid) < arl0 ? lo : hi) = mid;
  }
  return 0.5 * (lo + hi);
}

// ------------------------------------------------------------ EWMA chain ----

constexpr double kEwmaCellToStep = 0.2;  // target cell width / lambda (in sd of x)
constexpr double kEwmaSearchCellToStep =
    0.5;  // coarser chains while searching for lambda
constexpr int kEwmaMinCells = 41;
constexpr int kEwmaMaxCells = 20000;
constexpr double kMinEwmaLambda = 0.02;  // ChooseEwmaLambda's lower end

int EwmaCells(double lambda, double width, double cell_to_step = kEwmaCellToStep) {
  const double cells = 2.0 * width / (cell_to_step * std::sqrt(lambda * (2.0 - lambda)));
  return std::max(kEwmaMinCells, static_cast<int>(std::ceil(cells)));
}

double EwmaChain(double lambda, double width, double mu, int m) {
  const double limit = width * std::sqrt(lambda / (2.0 - lambda));
  const double w = 2.0 * limit / m;
  const double keep = 1.0 - lambda;
  const auto center = [&](int i) { return -limit + (i + 0.5) * w; };
  // From c_i the next z is centred at keep * c_i + lambda * mu with sd lambda;
  // in cells that is an offset of at most lambda * (m/2 + |mu| / w) from i,
  // plus the tail reach.
  const double reach = lambda * (0.5 * m + (std::abs(mu) + kTailCutoff) / w) + 2.0;
  const int band_width = std::min(m - 1, static_cast<int>(std::ceil(reach)));
  const int p = band_width, q = band_width;
  BandMatrix band = BandMatrix::Zero(m, p + q + 1);
  for (int i = 0; i < m; ++i) {
    const double from = keep * center(i);
    const int first = std::max(0, i - p);
    const int last = std::min(m - 1, i + q);
    for (int j = first; j <= last; ++j) {
      const double lower = (center(j) - 0.5 * w - from) / lambda - mu;
      const double upper = (center(j) + 0.5 * w - from) / lambda - mu;
      band(i, j - i + p) = (i == j ? 1.0 : 0.0) - NormalMass(lower, upper);
    }
  }
  const Vector arl = SolveBandedOnes(band, p, q);
  // From z_0 = 0.
  double result = 1.0;
  for (int j = 0; j < m; ++j) {
    result += NormalMass((center(j) - 0.5 * w) / lambda - mu,
                         (center(j) + 0.5 * w) / lambda - mu) *
              arl(j);
  }
  return result;
}

double EwmaArlUnchecked(double lambda, double width, double mu,
                        double cell_to_step = kEwmaCellToStep) {
  const int m = EwmaCells(lambda, width, cell_to_step);
  const double coarse = EwmaChain(lambda, width, mu, m);
  const double fine = EwmaChain(lambda, width, mu, 2 * m);
  return (4.0 * fine - coarse) / 3.0;
}

Status CheckEwmaArguments(double lambda, double width, double shift) {
  if (!(std::isfinite(lambda) && lambda > 0.0 && lambda <= 1.0)) {
    return Status::InvalidArgument("lambda must be in (0, 1]");
  }
  if (!(std::isfinite(width) && width > 0.0)) {
    return Status::InvalidArgument("width (L) must be finite and > 0");
  }
  if (!(std::isfinite(shift) && std::abs(shift) <= 20.0)) {
    return Status::InvalidArgument("shift must be finite with |shift| <= 20");
  }
  if (2 * EwmaCells(lambda, width) > kEwmaMaxCells) {
    return Status::OutOfRange(
        "lambda and width need more Markov-chain cells than the limit of 20000");
  }
  return Status::Ok();
}

// ---------------------------------------------------------- root finding ----

// Finds x in [lo, hi] with f(x) = 0, given f(lo) < 0 < f(hi) and f increasing,
// by false position with the Illinois modification (superlinear, never leaves
// the bracket). Stops when the bracket is narrower than tolerance.
template <typename F>
double SolveIncreasing(F&& f, double lo, double f_lo, double hi, double f_hi,
                       double tolerance) {
  int stale_side = 0;
  for (int iteration = 0; iteration < 200 && hi - lo > tolerance; ++iteration) {
    double x = hi - f_hi * (hi - lo) / (f_hi - f_lo);
    // Keep away from the ends so the bracket always shrinks.
    const double margin = 0.01 * (hi - lo);
    x = std::clamp(x, lo + std::min(margin, 0.5 * tolerance),
                   hi - std::min(margin, 0.5 * tolerance));
    const double fx = f(x);
    if (fx == 0.0) return x;
    if (fx < 0.0) {
      lo = x;
      f_lo = fx;
      if (stale_side == -1) f_hi *= 0.5;
      stale_side = -1;
    } else {
      hi = x;
      f_hi = fx;
      if (stale_side == 1) f_lo *= 0.5;
      stale_side = 1;
    }
  }
  return 0.5 * (lo + hi);
}

Status CheckTargetArl0(double arl0) {
  if (!(std::isfinite(arl0) && arl0 >= 1.0 && arl0 <= 1e12)) {
    return Status::InvalidArgument("arl0 must be in [1, 1e12]");
  }
  return Status::Ok();
}

StatusOr<double> CalibrateEwmaWidth(double arl0, double lambda, double cell_to_step) {
  const double log_target = std::log(arl0);
  const auto f = [&](double width) {
    return std::log(EwmaArlUnchecked(lambda, width, 0.0, cell_to_step)) - log_target;
  };
  // ARL(L) grows from 1 at L = 0; bracket upwards in steps of 1 from a narrow width.
  double lo = 0.05, f_lo = f(lo);
  if (f_lo >= 0.0) {
    return Status::OutOfRange("arl0 = " + std::to_string(arl0) +
                              " is too short to calibrate");
  }
  double hi = 2.0, f_hi = f(hi);
  while (f_hi < 0.0) {
    lo = hi;
    f_lo = f_hi;
    hi += 1.0;
    if (2 * EwmaCells(lambda, hi, cell_to_step) > kEwmaMaxCells) {
      return Status::OutOfRange("arl0 = " + std::to_string(arl0) +
                                " needs a width beyond the chain's limit");
    }
    f_hi = f(hi);
  }
  return SolveIncreasing(f, lo, f_lo, hi, f_hi, 1e-7 * std::max(1.0, hi));
}

// ------------------------------------------------------ table look-ups ----

// Piecewise-linear interpolation of ys over xs (increasing), extrapolating
// linearly from the end segments.
double InterpolateLinear(const double* xs, const double* ys, int n, double x,
                         bool* outside) {
  *outside = x < xs[0] || x > xs[n - 1];
  int segment = 0;
  while (segment < n - 2 && x > xs[segment + 1]) ++segment;
  const double t = (x - xs[segment]) / (xs[segment + 1] - xs[segment]);
  return ys[segment] + t * (ys[segment + 1] - ys[segment]);
}

// A threshold row: threshold against log ARL0 on the table's grid.
struct ThresholdRow {
  std::vector<double> log_arl0;
  std::vector<double> threshold;
  std::vector<double> relative_error;
  bool complete =
      true;  // false: cells at the short-ARL0 end were unreachable and dropped
};

ThresholdRow PageHinkleyRow(double delta, bool* outside) {
  // Interpolate (or extrapolate) between the two delta rows around log delta.
  std::vector<double> log_delta(kPageHinkleyDeltaCount);
  for (int d = 0; d < kPageHinkleyDeltaCount; ++d)
    log_delta[d] = std::log(kPageHinkleyDelta[d]);
  const double x = std::log(delta);
  *outside = x < log_delta.front() - 1e-12 || x > log_delta.back() + 1e-12;
  int d = 0;
  while (d < kPageHinkleyDeltaCount - 2 && x > log_delta[d + 1]) ++d;
  const double t = (x - log_delta[d]) / (log_delta[d + 1] - log_delta[d]);
  ThresholdRow row;
  for (int a = 0; a < kTableArl0Count; ++a) {
    // 0 marks a cell no positive lambda reaches (large delta, short ARL0).
    if (kPageHinkleyLambda[d][a] <= 0.0 || kPageHinkleyLambda[d + 1][a] <= 0.0) {
      row.complete = false;
      continue;
    }
    row.log_arl0.push_back(std::log(kTableArl0[a]));
    row.threshold.push_back(kPageHinkleyLambda[d][a] + t * (kPageHinkleyLambda[d + 1][a] -
                                                            kPageHinkleyLambda[d][a]));
    row.relative_error.push_back(
        std::max(kPageHinkleyRelativeError[d][a], kPageHinkleyRelativeError[d + 1][a]));
  }
  return row;
}

// BOCPD thresholds live in (0, 1 - hazard); the table is interpolated on the
// logit scale g = log(C / (1 - hazard - C)) it was generated on, so
// extrapolation stays inside that interval.
double BocpdLogit(double threshold) {
  const double top = 1.0 - kTableBocpdHazard;
  return std::log(threshold / (top - threshold));
}
double BocpdFromLogit(double logit) {
  return (1.0 - kTableBocpdHazard) / (1.0 + std::exp(-logit));
}

ThresholdRow BocpdRow() {
  ThresholdRow row;
  for (int a = 0; a < kBocpdArl0Count; ++a) {
    // 0 marks an ARL0 shorter than BOCPD can give (it cannot fire before
    // min_readings readings).
    if (kBocpdThreshold[a] <= 0.0) {
      row.complete = false;
      continue;
    }
    row.log_arl0.push_back(std::log(kBocpdArl0[a]));
    row.threshold.push_back(BocpdLogit(kBocpdThreshold[a]));
    row.relative_error.push_back(kBocpdRelativeError[a]);
  }
  return row;
}

TableLookup ThresholdFor(const ThresholdRow& row, double arl0) {
  TableLookup result;
  const int n = static_cast<int>(row.log_arl0.size());
  bool outside = false;
  const double log_arl0 = std::log(arl0);
  result.value =
      InterpolateLinear(row.log_arl0.data(), row.threshold.data(), n, log_arl0, &outside);
  result.extrapolated = outside;
  bool ignored = false;
  result.relative_error = InterpolateLinear(
      row.log_arl0.data(), row.relative_error.data(), n,
      std::clamp(log_arl0, row.log_arl0.front(), row.log_arl0.back()), &ignored);
  return result;
}

TableLookup Arl0For(const ThresholdRow& row, double threshold) {
  TableLookup result;
  const int n = static_cast<int>(row.log_arl0.size());
  bool outside = false;
  result.value = std::exp(InterpolateLinear(row.threshold.data(), row.log_arl0.data(), n,
                                            threshold, &outside));
  result.extrapolated = outside;
  bool ignored = false;
  result.relative_error = InterpolateLinear(
      row.threshold.data(), row.relative_error.data(), n,
      std::clamp(threshold, row.threshold.front(), row.threshold.back()), &ignored);
  return result;
}

// Two-sided Shewhart limit z with 2 Q(z) = 1 / arl0.
double ShewhartLimit(double arl0) { return UpperTailInverse(0.5 / arl0); }

}  // namespace

// ---------------------------------------------------------------- CUSUM ----

StatusOr<double> CusumArl(double k, double h, double shift, double headstart, int sides) {
  if (Status s = CheckCusumArguments(k, h, shift, headstart, sides); !s.ok()) return s;
  if (sides == 1) return UpperCusumArl(k, h, shift, headstart);
  return TwoSidedCusumArl(k, h, shift, headstart);
}

StatusOr<double> CusumArlSiegmund(double k, double h, double shift, int sides) {
  if (Status s = CheckCusumArguments(k, h, shift, 0.0, sides); !s.ok()) return s;
  const double b = h + 1.166;
  const double up = SiegmundOneSided(shift - k, b);
  if (sides == 1) return up;
  const double down = SiegmundOneSided(-shift - k, b);
  return 1.0 / (1.0 / up + 1.0 / down);
}

StatusOr<double> CalibrateCusumH(double arl0, double k, double headstart_fraction) {
  if (Status s = CheckTargetArl0(arl0); !s.ok()) return s;
  if (!(std::isfinite(k) && k > 0.0))
    return Status::InvalidArgument("k must be finite and > 0");
  if (!(std::isfinite(headstart_fraction) && headstart_fraction >= 0.0 &&
        headstart_fraction < 1.0)) {
    return Status::InvalidArgument("headstart_fraction must be in [0, 1)");
  }
  // At h = 0 the chart is a Shewhart chart with limits +/- k.
  const double arl_at_zero = 1.0 / (2.0 * UpperTail(k));
  if (arl_at_zero >= arl0) {
    return Status::OutOfRange(
        "k = " + std::to_string(k) + " is too large for arl0 = " + std::to_string(arl0) +
        ": even h = 0 gives an in-control ARL of " + std::to_string(arl_at_zero));
  }
  const double log_target = std::log(arl0);
  const auto f = [&](double h) {
    return std::log(TwoSidedCusumArl(k, h, 0.0, headstart_fraction * h)) - log_target;
  };
  // Bracket around Siegmund's zero-start estimate (within a few % of the
  // chain's ARL0, so the bracket is usually right first time).
  double lo = 0.0, f_lo = std::log(arl_at_zero) - log_target;
  const double guess = SiegmundInControlH(k, arl0);
  double hi = 1.1 * guess + 0.2, f_hi = f(hi);
  if (f_hi > 0.0) {
    const double inner = 0.9 * guess - 0.2;
    if (inner > 0.0) {
      const double f_inner = f(inner);
      if (f_inner < 0.0) {
        lo = inner;
        f_lo = f_inner;
      } else {
        hi = inner;
        f_hi = f_inner;
      }
    }
  }
  while (f_hi < 0.0) {
    lo = hi;
    f_lo = f_hi;
    hi *= 1.5;
    if (2.0 * CusumCells(hi) > kCusumMaxCells) {
      return Status::OutOfRange("arl0 = " + std::to_string(arl0) + " with k = " +
                                std::to_string(k) + " needs h beyond the chain's limit");
    }
    f_hi = f(hi);
  }
  return SolveIncreasing(f, lo, f_lo, hi, f_hi, 1e-7 * std::max(1.0, hi));
}

// ----------------------------------------------------------------- EWMA ----

StatusOr<double> EwmaArl(double lambda, double width, double shift) {
  if (Status s = CheckEwmaArguments(lambda, width, shift); !s.ok()) return s;
  return EwmaArlUnchecked(lambda, width, shift);
}

StatusOr<double> CalibrateEwmaL(double arl0, double lambda) {
  if (Status s = CheckTargetArl0(arl0); !s.ok()) return s;
  if (Status s = CheckEwmaArguments(lambda, 1.0, 0.0); !s.ok()) return s;
  return CalibrateEwmaWidth(arl0, lambda, kEwmaCellToStep);
}

StatusOr<double> ChooseEwmaLambda(double arl0, double shift) {
  if (Status s = CheckTargetArl0(arl0); !s.ok()) return s;
  if (!(std::isfinite(shift) && shift > 0.0 && shift <= 20.0)) {
    return Status::InvalidArgument("shift must be in (0, 20]");
  }
  // ARL(shift) at the L calibrated for arl0, as a function of log lambda, on
  // coarser chains (about 1e-3 relative): enough to rank designs whose ARLs
  // differ by more than that, at a tenth of the cost.
  Status failure;
  const auto cost = [&](double log_lambda) {
    const double lambda = std::exp(log_lambda);
    StatusOr<double> width = CalibrateEwmaWidth(arl0, lambda, kEwmaSearchCellToStep);
    if (!width.ok()) {
      if (failure.ok()) failure = width.status();
      return std::numeric_limits<double>::infinity();
    }
    return EwmaArlUnchecked(lambda, *width, shift, kEwmaSearchCellToStep);
  };
  // Coarse grid on log lambda over [log 0.02, 0], then golden-section search
  // in the cells either side of the best grid point (the curve is unimodal in
  // practice and flat near its minimum, so a 1% bracket is plenty).
  const double lo = std::log(kMinEwmaLambda), hi = 0.0;
  constexpr int kGrid = 7;
  const double step = (hi - lo) / (kGrid - 1);
  double best_x = hi, best_cost = std::numeric_limits<double>::infinity();
  for (int i = 0; i < kGrid; ++i) {
    const double x = lo + i * step;
    const double c = cost(x);
    if (!failure.ok()) return failure;
    if (c < best_cost) {
      best_cost = c;
      best_x = x;
    }
  }
  double a = std::max(lo, best_x - step), b = std::min(hi, best_x + step);
  const double ratio = (std::sqrt(5.0) - 1.0) / 2.0;
  double x1 = b - ratio * (b - a), x2 = a + ratio * (b - a);
  double c1 = cost(x1), c2 = cost(x2);
  while (b - a > 0.01) {
    if (c1 <= c2) {
      b = x2;
      x2 = x1;
      c2 = c1;
      x1 = b - ratio * (b - a);
      c1 = cost(x1);
    } else {
      a = x1;
      x1 = x2;
      c1 = c2;
      x2 = a + ratio * (b - a);
      c2 = cost(x2);
    }
  }
  if (!failure.ok()) return failure;
  // An end of the range can be the optimum (lambda = 1 for large shifts).
  const double x = best_cost < std::min(c1, c2) ? best_x : (c1 <= c2 ? x1 : x2);
  return std::exp(x);
}

// --------------------------------------------------- simulation tables ----

StatusOr<TableLookup> PageHinkleyLambdaFor(double arl0, double delta) {
  if (Status s = CheckTargetArl0(arl0); !s.ok()) return s;
  if (!(std::isfinite(delta) && delta > 0.0 && delta <= 20.0)) {
    return Status::InvalidArgument("delta must be in (0, 20]");
  }
  bool delta_outside = false;
  const ThresholdRow row = PageHinkleyRow(delta, &delta_outside);
  if (row.log_arl0.size() < 2 ||
      (!row.complete && std::log(arl0) < row.log_arl0.front())) {
    return Status::OutOfRange(
        "arl0 = " + std::to_string(arl0) + " at delta = " + std::to_string(delta) +
        " is below the Page-Hinkley test's reach: even a threshold "
        "near 0 gives a longer in-control ARL (use a smaller delta)");
  }
  TableLookup result = ThresholdFor(row, arl0);
  result.extrapolated = result.extrapolated || delta_outside;
  if (!(result.value > 0.0)) {
    return Status::OutOfRange(
        "arl0 = " + std::to_string(arl0) + " at delta = " + std::to_string(delta) +
        " is below the Page-Hinkley test's reach: even a threshold "
        "near 0 gives a longer in-control ARL (use a smaller delta)");
  }
  return result;
}

StatusOr<TableLookup> PageHinkleyArl0For(double lambda, double delta) {
  if (!(std::isfinite(lambda) && lambda > 0.0)) {
    return Status::InvalidArgument("lambda must be finite and > 0");
  }
  if (!(std::isfinite(delta) && delta > 0.0 && delta <= 20.0)) {
    return Status::InvalidArgument("delta must be in (0, 20]");
  }
  bool delta_outside = false;
  const ThresholdRow row = PageHinkleyRow(delta, &delta_outside);
  if (row.log_arl0.size() < 2) {
    return Status::OutOfRange("delta = " + std::to_string(delta) +
                              " is beyond the table");
  }
  TableLookup result = Arl0For(row, lambda);
  result.extrapolated = result.extrapolated || delta_outside;
  return result;
}

StatusOr<TableLookup> BocpdThresholdFor(double arl0) {
  if (Status s = CheckTargetArl0(arl0); !s.ok()) return s;
  const ThresholdRow row = BocpdRow();
  if (std::log(arl0) < row.log_arl0.front() - 1e-12) {
    return Status::OutOfRange(
        "arl0 = " + std::to_string(arl0) +
        " is shorter than BOCPD can be calibrated for: it "
        "cannot fire before min_readings = " +
        std::to_string(kTableBocpdMinReadings) +
        " readings; the shortest tabulated ARL0 is " +
        std::to_string(static_cast<int>(std::round(std::exp(row.log_arl0.front())))));
  }
  TableLookup result = ThresholdFor(row, arl0);
  result.value = BocpdFromLogit(result.value);
  return result;
}

StatusOr<TableLookup> BocpdArl0For(double threshold) {
  if (!(std::isfinite(threshold) && threshold > 0.0 &&
        threshold < 1.0 - kTableBocpdHazard)) {
    return Status::InvalidArgument("threshold must be in (0, 1 - hazard)");
  }
  return Arl0For(BocpdRow(), BocpdLogit(threshold));
}

bool ThresholdTablesMatchDefaults(std::string* why) {
  const auto fail = [why](const std::string& message) {
    if (why != nullptr) *why = message + "; rerun tests/tools/tabulate_thresholds";
    return false;
  };
  const PageHinkleyOptions page_hinkley;
  if (page_hinkley.use_running_mean != kTablePageHinkleyRunningMean) {
    return fail("PageHinkleyOptions::use_running_mean changed since the table was made");
  }
  if (page_hinkley.alpha != kTablePageHinkleyAlpha) {
    return fail("PageHinkleyOptions::alpha changed since the table was made");
  }
  const BocpdOptions bocpd;
  // The table prints doubles to 6 significant digits.
  const auto same = [](double a, double b) {
    return std::abs(a - b) <= 1e-5 * std::abs(b);
  };
  if (!same(bocpd.mu0, kTableBocpdMu0) || !same(bocpd.kappa0, kTableBocpdKappa0) ||
      !same(bocpd.alpha0, kTableBocpdAlpha0) || !same(bocpd.beta0, kTableBocpdBeta0)) {
    return fail("the BocpdOptions prior changed since the table was made");
  }
  if (!same(bocpd.hazard, kTableBocpdHazard)) return fail("BocpdOptions::hazard changed");
  if (bocpd.max_run_length != kTableBocpdMaxRunLength) {
    return fail("BocpdOptions::max_run_length changed");
  }
  if (!same(bocpd.prune_tolerance, kTableBocpdPruneTolerance)) {
    return fail("BocpdOptions::prune_tolerance changed");
  }
  if (bocpd.window != kTableBocpdWindow) return fail("BocpdOptions::window changed");
  if (bocpd.min_readings != kTableBocpdMinReadings) {
    return fail("BocpdOptions::min_readings changed");
  }
  return true;
}

// ------------------------------------------------------------ Monte Carlo ----

StatusOr<RunLengthEstimate> SimulateRunLength(const std::function<RunLengthStep()>& make,
                                              double shift, int runs, std::uint64_t seed,
                                              std::int64_t cap,
                                              std::int64_t change_after) {
  if (runs < 2) return Status::InvalidArgument("runs must be >= 2");
  if (change_after < 0) return Status::InvalidArgument("change_after must be >= 0");
  if (cap <= change_after) return Status::InvalidArgument("cap must exceed change_after");
  if (!std::isfinite(shift)) return Status::InvalidArgument("shift must be finite");
  RunLengthEstimate estimate;
  std::vector<double> lengths;
  lengths.reserve(runs);
  double sum = 0.0, sum_squares = 0.0;
  for (std::uint64_t attempt = 0; estimate.runs < runs; ++attempt) {
    if (estimate.discarded > runs) {
      return Status::FailedPrecondition(
          "more than half the simulated runs fired before the change at reading " +
          std::to_string(change_after));
    }
    Random random(seed + 0x9E3779B97F4A7C15ULL * (attempt + 1));
    RunLengthStep step = make();
    std::int64_t t = 1;
    bool fired = false;
    for (; t <= cap; ++t) {
      const double x = random.Normal() + (t > change_after ? shift : 0.0);
      if (step(x, t * kMicrosPerSecond)) {
        fired = true;
        break;
      }
    }
    if (fired && t <= change_after) {
      ++estimate.discarded;
      continue;
    }
    const double length = static_cast<double>((fired ? t : cap) - change_after);
    if (!fired) ++estimate.censored;
    lengths.push_back(length);
    sum += length;
    sum_squares += length * length;
    ++estimate.runs;
  }
  const double n = estimate.runs;
  estimate.mean = sum / n;
  const double variance =
      std::max(0.0, (sum_squares - n * estimate.mean * estimate.mean) / (n - 1));
  estimate.standard_error = std::sqrt(variance / n);
  const auto middle = lengths.begin() + runs / 2;
  std::nth_element(lengths.begin(), middle, lengths.end());
  estimate.median = *middle;
  if (runs % 2 == 0) {
    estimate.median =
        0.5 * (estimate.median + *std::max_element(lengths.begin(), middle));
  }
  return estimate;
}

// ------------------------------------------------------------------ design ----

StatusOr<DetectorDesign> DesignDetectors(double arl0, double shift,
                                         const std::vector<DetectorKind>& detectors,
                                         int agree) {
  if (!(std::isfinite(arl0) && arl0 >= kMinTargetArl0 && arl0 <= kMaxTargetArl0)) {
    return Status::InvalidArgument("arl0 must be in [10, 1e7] readings");
  }
  if (!(std::isfinite(shift) && shift > 0.0 && shift <= kMaxTargetShift)) {
    return Status::InvalidArgument(
        "shift must be in (0, 10] residual standard deviations");
  }
  if (detectors.empty())
    return Status::InvalidArgument("detectors must name at least one detector");
  for (size_t i = 0; i < detectors.size(); ++i) {
    for (size_t j = 0; j < i; ++j) {
      if (detectors[i] == detectors[j]) {
        return Status::InvalidArgument("detectors names " +
                                       std::string(ToString(detectors[i])) + " twice");
      }
    }
  }
  const int n = static_cast<int>(detectors.size());
  if (agree < 1 || agree > n) {
    return Status::InvalidArgument("agree must be in [1, " + std::to_string(n) +
                                   "] (the number of detectors)");
  }
  DetectorDesign design;
  design.target_arl0 = arl0;
  design.shift = shift;
  design.agree = agree;
  design.detectors = detectors;
  design.per_detector_arl0 = arl0 * n / agree;
  const double per = design.per_detector_arl0;
  std::string why;
  for (DetectorKind kind : detectors) {
    switch (kind) {
      case DetectorKind::kCusum: {
        design.has_cusum = true;
        design.cusum = CusumOptions{};
        design.cusum.k = std::min(0.5 * shift, 0.5 * ShewhartLimit(per));
        StatusOr<double> h = CalibrateCusumH(per, design.cusum.k);
        if (!h.ok()) return h.status();
        design.cusum.h = *h;
        design.cusum.headstart = 0.0;
        design.cusum.arl0 = per;
        if (!design.cusum.IsValid(&why))
          return Status::FailedPrecondition("cusum: " + why);
        break;
      }
      case DetectorKind::kEwma: {
        design.has_ewma = true;
        design.ewma = EwmaOptions{};
        StatusOr<double> lambda = ChooseEwmaLambda(per, shift);
        if (!lambda.ok()) return lambda.status();
        StatusOr<double> width = CalibrateEwmaL(per, *lambda);
        if (!width.ok()) return width.status();
        design.ewma.lambda = *lambda;
        design.ewma.width = *width;
        design.ewma.exact_limits = false;  // the chain's ARL is for fixed limits
        design.ewma.arl0 = per;
        if (!design.ewma.IsValid(&why)) return Status::FailedPrecondition("ewma: " + why);
        break;
      }
      case DetectorKind::kPageHinkley: {
        design.has_page_hinkley = true;
        design.page_hinkley = PageHinkleyOptions{};
        design.page_hinkley.delta = std::min(0.5 * shift, 0.5 * ShewhartLimit(per));
        StatusOr<TableLookup> lambda =
            PageHinkleyLambdaFor(per, design.page_hinkley.delta);
        if (!lambda.ok()) return lambda.status();
        design.page_hinkley.lambda = lambda->value;
        design.page_hinkley_extrapolated = lambda->extrapolated;
        design.page_hinkley.arl0 = per;
        if (!design.page_hinkley.IsValid(&why)) {
          return Status::FailedPrecondition("page-hinkley: " + why);
        }
        break;
      }
      case DetectorKind::kBocpd: {
        design.has_bocpd = true;
        design.bocpd = BocpdOptions{};
        StatusOr<TableLookup> threshold = BocpdThresholdFor(per);
        if (!threshold.ok()) return threshold.status();
        design.bocpd.threshold = threshold->value;
        design.bocpd_extrapolated = threshold->extrapolated;
        design.bocpd.arl0 = per;
        if (!design.bocpd.IsValid(&why))
          return Status::FailedPrecondition("bocpd: " + why);
        design.bocpd_tables = RunLengthTables::Make(design.bocpd);
        break;
      }
    }
  }
  return design;
}

}  // namespace plumbline
