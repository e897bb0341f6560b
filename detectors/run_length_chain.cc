#include "detectors/run_length_chain.h"

#include <Eigen/Dense>
#include <algorithm>
#include <cfloat>
#include <cmath>
#include <functional>
#include <limits>
#include <string>

#include "detectors/eigen_types.h"

namespace plumbline {
namespace {

// The matrix, factorisation and right-hand side of one chain size, kept so a
// calibration's repeated ARLs allocate nothing after the first.
struct ChainWorkspace {
  explicit ChainWorkspace(int n) : a(n, n), lu(n), ones(Vector::Ones(n)) {}
  Matrix a;
  Eigen::PartialPivLU<Matrix> lu;
  Vector ones;
};

// The ARL of the m-cell chain whose row i holds F((j + 1/2) w - i w) at
// cell_cdf(i, j, (j + 1/2) w - i w), j = 0..m.
template <typename CellCdf>
double ChainArl(const CellCdf& cell_cdf, double h, double start, int m,
                ChainWorkspace& space) {
  const double w = h / (m + 0.5);
  const int n = m + 1;
  Matrix& a = space.a;
  a.setIdentity(n, n);
  for (int i = 0; i < n; ++i) {
    const double s = i * w;
    double below = cell_cdf(i, 0, 0.5 * w - s);
    a(i, 0) -= below;
    for (int j = 1; j < n; ++j) {
      const double upper = cell_cdf(i, j, (j + 0.5) * w - s);
      a(i, j) -= upper - below;
      below = upper;
    }
  }
  space.lu.compute(a);
  const Vector arl = space.lu.solve(space.ones);
  // Start in the cell that holds `start`, interpolating between cell centres.
  const double position = start / w;
  const int lower = static_cast<int>(std::floor(position));
  if (lower >= n - 1) return arl[n - 1];
  const double fraction = position - lower;
  return (1.0 - fraction) * arl[lower] + fraction * arl[lower + 1];
}

template <typename CellCdf>
double RichardsonArl(const CellCdf& coarse_cdf, const CellCdf& fine_cdf, double h,
                     double start, int cells, ChainWorkspace& coarse_space,
                     ChainWorkspace& fine_space) {
  const double coarse = ChainArl(coarse_cdf, h, start, cells, coarse_space);
  const double fine = ChainArl(fine_cdf, h, start, 2 * cells, fine_space);
  return (4.0 * fine - coarse) / 3.0;
}

// An IncrementCdf called at every cell edge.
struct FunctionCellCdf {
  double operator()(int, int, double y) const { return (*cdf)(y); }
  const IncrementCdf* cdf;
};

// g(h) = log ARL(h) - log arl0, the gap a calibration closes; -inf where the
// chain gives no positive ARL.
struct ArlGap {
  std::function<double(double)> arl;
  double log_arl0;
  double operator()(double h) const {
    const double a = arl(h);
    return a > 0 ? std::log(a) - log_arl0 : -std::numeric_limits<double>::infinity();
  }
};

// The smallest h to within `tolerance` (relative) where g reaches 0, given
// g(low) < 0 <= g(high); returns the upper end of the final bracket. g rises
// with h and is close to linear (the ARL of a CUSUM grows about exponentially
// in h), so false position closes in much faster than bisection (a step per
// halving: eight for a 1% bracket on [h, 3 h], fifteen for 1e-4). The
// Illinois rule (Dowell and Jarratt 1971, from memory) halves the kept end's
// g when the same end is kept twice, so both ends move; a step that falls
// outside the bracket or is not finite (an ARL beyond double range) takes the
// midpoint.
double CloseIn(const ArlGap& g, double low, double g_low, double high, double g_high,
               double tolerance) {
  int kept = 0;  // +1: high was kept by the last step, -1: low was
  while (high - low > tolerance * high) {
    double x = (low * g_high - high * g_low) / (g_high - g_low);
    const double margin = 0.1 * tolerance * high;  // stay strictly inside
    if (!(x > low + margin && x < high - margin)) {
      x = std::isfinite(x) ? std::clamp(x, low + margin, high - margin) : 0.5 * (low + high);
    }
    const double g_x = g(x);
    if (g_x < 0) {
      low = x, g_low = g_x;
      if (kept == 1) g_high *= 0.5;
      kept = 1;
    } else {
      high = x, g_high = g_x;
      if (kept == -1) g_low *= 0.5;
      kept = -1;
    }
  }
  return high;
}

}  // namespace

double EmpiricalCdf(std::span<const double> sorted, double y) {
  return static_cast<double>(std::upper_bound(sorted.begin(), sorted.end(), y) -
                             sorted.begin()) /
         static_cast<double>(sorted.size());
}

void EmpiricalChainCdf::Tabulate(std::span<const double> sorted, double h, int m) {
  sorted_ = sorted;
  const int n = m + 1;
  offset_ = n - 1;
  const double w = h / (m + 0.5);
  // The edge (j + 1/2) w - i w as ChainArl rounds it lies within about
  // 4 u n w of (k + 1/2) w, k = j - i (u = DBL_EPSILON / 2: three roundings of
  // terms below n w, and one of the tabulated edge); 8 times that is the band.
  const double band = 16.0 * DBL_EPSILON * (n + 1) * w;
  const double size = static_cast<double>(sorted.size());
  table_.resize(2 * n - 1);
  for (int k = -(n - 1); k <= n - 1; ++k) {
    const double edge = (k + 0.5) * w;
    const auto below_band = std::lower_bound(sorted.begin(), sorted.end(), edge - band);
    const auto above_band = std::upper_bound(below_band, sorted.end(), edge + band);
    // With no sample value in the band, every edge rounded into it counts the
    // same values; otherwise that edge is searched as it is.
    table_[k + offset_] = below_band == above_band
                              ? static_cast<double>(below_band - sorted.begin()) / size
                              : -1.0;
  }
}

double OneSidedCusumArl(const IncrementCdf& cdf, double h, double start, int cells) {
  ChainWorkspace coarse(cells + 1), fine(2 * cells + 1);
  const FunctionCellCdf cell_cdf{&cdf};
  return RichardsonArl(cell_cdf, cell_cdf, h, start, cells, coarse, fine);
}

double OneSidedCusumArlFromSample(std::span<const double> sorted_increments, double h,
                                  int cells) {
  EmpiricalChainCdf coarse_cdf, fine_cdf;
  coarse_cdf.Tabulate(sorted_increments, h, cells);
  fine_cdf.Tabulate(sorted_increments, h, 2 * cells);
  ChainWorkspace coarse(cells + 1), fine(2 * cells + 1);
  return RichardsonArl(coarse_cdf, fine_cdf, h, 0.0, cells, coarse, fine);
}

StatusOr<double> CalibrateOneSidedCusum(const IncrementCdf& cdf, double arl0,
                                        double h_max) {
  if (!(arl0 >= 2 && std::isfinite(arl0))) {
    return Status::InvalidArgument("arl0 must be finite and >= 2");
  }
  // One pair of workspaces for the whole search (a fresh 301-cell matrix per
  // step was a quarter of the time, in page faults).
  constexpr int kCells = 150;  // OneSidedCusumArl's default
  ChainWorkspace coarse(kCells + 1), fine(2 * kCells + 1);
  const FunctionCellCdf cell_cdf{&cdf};
  const ArlGap g{[&](double h) {
                   return RichardsonArl(cell_cdf, cell_cdf, h, 0.0, kCells, coarse, fine);
                 },
                 std::log(arl0)};
  // Double h from 1 until the ARL reaches arl0, then close in on it.
  double low = 1e-3, high = 1.0, g_low = std::nan(""), g_high = g(high);
  while (g_high < 0) {
    low = high, g_low = g_high;
    high *= 2.0;
    if (high > h_max) {
      return Status::OutOfRange("arl0 " + std::to_string(arl0) +
                                " needs a decision interval above " + std::to_string(h_max));
    }
    g_high = g(high);
  }
  if (std::isnan(g_low)) g_low = g(low);
  return CloseIn(g, low, g_low, high, g_high, 1e-4);
}

StatusOr<double> CalibrateOneSidedCusumFromSample(std::vector<double> increments,
                                                  double arl0, double h_floor,
                                                  double h_ceiling) {
  if (increments.size() < 100) {
    return Status::InvalidArgument("need at least 100 increments to calibrate from a sample");
  }
  if (!(h_floor > 0 && h_ceiling >= h_floor)) {
    return Status::InvalidArgument("need 0 < h_floor <= h_ceiling");
  }
  std::sort(increments.begin(), increments.end());
  // A sample of this size pins the ARL down to a few per cent at best, so a
  // coarser chain (80 cells, which agrees with 150 on the thresholds it picks;
  // 40 did not) and a 1% bracket are enough, and keep a re-fit to tens of
  // milliseconds per series.
  constexpr int kCells = 80;
  EmpiricalChainCdf coarse_cdf, fine_cdf;
  ChainWorkspace coarse(kCells + 1), fine(2 * kCells + 1);
  const ArlGap g{[&](double h) {
                   coarse_cdf.Tabulate(increments, h, kCells);
                   fine_cdf.Tabulate(increments, h, 2 * kCells);
                   return RichardsonArl(coarse_cdf, fine_cdf, h, 0.0, kCells, coarse, fine);
                 },
                 std::log(arl0)};
  const double g_low = g(h_floor);
  if (g_low >= 0) return h_floor;
  const double g_high = g(h_ceiling);
  if (g_high < 0) return h_ceiling;
  return CloseIn(g, h_floor, g_low, h_ceiling, g_high, 1e-2);
}

}  // namespace plumbline
