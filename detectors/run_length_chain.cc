#include "detectors/run_length_chain.h"

#include <algorithm>
#include <cmath>
#include <functional>
#include <limits>
#include <string>
#include <vector>

namespace plumbline {
namespace {

// The vectors of one chain size, kept so a calibration's repeated ARLs
// allocate nothing after the first.
struct ChainWorkspace {
  explicit ChainWorkspace(int n)
      : edges(2 * static_cast<size_t>(n)),
        r(2 * static_cast<size_t>(n) - 1),
        u(static_cast<size_t>(n)),
        forward(static_cast<size_t>(n)),
        backward(static_cast<size_t>(n)),
        y(static_cast<size_t>(n)),
        z(static_cast<size_t>(n)) {}
  std::vector<double> edges, r, u, forward, backward, y, z;
};

// Solves B y = 1 and B z = u for the n x n Toeplitz matrix B_ij = r[i - j + n - 1]
// by Levinson's recursion for a general (nonsymmetric) Toeplitz matrix (Golub
// and Van Loan, "Matrix Computations", 3rd ed., section 4.7; from memory): the
// leading m x m block's solutions of B f = e_first and B g = e_last extend to
// the block of m + 1 with the errors their one new row and column make, and
// each right-hand side's solution with them, in O(n^2). Where every state can
// alarm (each row of R sums to below 1), every leading block of the chain's B
// is strictly diagonally dominant by rows, so none is singular and the
// recursion cannot break down. A chain with a state that never alarms has no
// finite ARL: it comes out NaN or infinite, as from the dense LU before (a
// re-fit then keeps its ceiling).
void SolveToeplitz(int n, ChainWorkspace& space) {
  const double* r = space.r.data() + (n - 1);  // r[d], d = i - j in -(n-1)..n-1
  double* f = space.forward.data();
  double* g = space.backward.data();
  double* y = space.y.data();
  double* z = space.z.data();
  const double* u = space.u.data();
  f[0] = g[0] = 1.0 / r[0];
  y[0] = 1.0 / r[0];
  z[0] = u[0] / r[0];
  for (int m = 1; m < n; ++m) {
    // Row m of the block of m + 1 against [f; 0], [y; 0], [z; 0]; row 0 against [0; g].
    double ef = 0, eg = 0, ey = 0, ez = 0;
    for (int j = 0; j < m; ++j) {
      ef += r[m - j] * f[j];
      eg += r[-(j + 1)] * g[j];
      ey += r[m - j] * y[j];
      ez += r[m - j] * z[j];
    }
    const double scale = 1.0 / (1.0 - ef * eg);
    // f' = ([f; 0] - ef [0; g]) / (1 - ef eg), g' = ([0; g] - eg [f; 0]) / (...),
    // from the end down so each old value is read before it is replaced.
    for (int j = m; j >= 0; --j) {
      const double fo = j < m ? f[j] : 0.0;
      const double go = j > 0 ? g[j - 1] : 0.0;
      f[j] = (fo - ef * go) * scale;
      g[j] = (go - eg * fo) * scale;
    }
    const double dy = 1.0 - ey, dz = u[m] - ez;
    y[m] = 0.0;
    z[m] = 0.0;
    for (int j = 0; j <= m; ++j) {
      y[j] += dy * g[j];
      z[j] += dz * g[j];
    }
  }
}

// The ARL of the m-cell chain (Brook and Evans 1972) whose cell i (i = 1..m)
// is centred at i w and cell 0 is the atom at zero, w = h / (m + 1/2): from
// cell i the statistic moves to cell j >= 1 with chance F((j + 1/2) w - i w) -
// F((j - 1/2) w - i w), a function of j - i alone, and to the atom with chance
// F(w / 2 - i w). So R = T + u e_0' with T Toeplitz (every column as the
// interior's) and u_i = F((-i - 1/2) w), the mass below the lowest interior
// edge that the atom collects, and (I - R) x = 1 is solved by Sherman and
// Morrison's formula from two Toeplitz solves with B = I - T:
//
//   x = y + z y_0 / (1 - z_0),   B y = 1,   B z = u.
//
// cdf(y) is F, called once at each edge (k + 1/2) w, k = -n..n-1.
template <typename Cdf>
double ChainArl(const Cdf& cdf, double h, double start, int m, ChainWorkspace& space) {
  const double w = h / (m + 0.5);
  const int n = m + 1;
  double* edges = space.edges.data() + n;  // edges[k], k = -n..n-1
  for (int k = -n; k < n; ++k) edges[k] = cdf((k + 0.5) * w);
  // B_ij = delta_ij - t_{j - i}, t_d = F at edge d less F at edge d - 1: in the
  // r[i - j] form of SolveToeplitz, r[d] = delta_d0 - t_{-d}.
  for (int d = -(n - 1); d <= n - 1; ++d) {
    const double t = edges[-d] - edges[-d - 1];
    space.r[static_cast<size_t>(d + n - 1)] = (d == 0 ? 1.0 : 0.0) - t;
  }
  for (int i = 0; i < n; ++i) space.u[static_cast<size_t>(i)] = edges[-i - 1];
  SolveToeplitz(n, space);
  const double* y = space.y.data();
  const double* z = space.z.data();
  const double lift = y[0] / (1.0 - z[0]);
  const auto arl = [&](int i) { return y[i] + z[i] * lift; };
  // Start in the cell that holds `start`, interpolating between cell centres.
  const double position = start / w;
  const int lower = static_cast<int>(std::floor(position));
  if (lower >= n - 1) return arl(n - 1);
  const double fraction = position - lower;
  return (1.0 - fraction) * arl(lower) + fraction * arl(lower + 1);
}

template <typename Cdf>
double RichardsonArl(const Cdf& cdf, double h, double start, int cells,
                     ChainWorkspace& coarse_space, ChainWorkspace& fine_space) {
  const double coarse = ChainArl(cdf, h, start, cells, coarse_space);
  const double fine = ChainArl(cdf, h, start, 2 * cells, fine_space);
  return (4.0 * fine - coarse) / 3.0;
}

// The empirical CDF of a sorted sample, as a chain reads it.
struct SampleCdf {
  std::span<const double> sorted;
  double operator()(double y) const { return EmpiricalCdf(sorted, y); }
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

double OneSidedCusumArl(const IncrementCdf& cdf, double h, double start, int cells) {
  ChainWorkspace coarse(cells + 1), fine(2 * cells + 1);
  return RichardsonArl(cdf, h, start, cells, coarse, fine);
}

double OneSidedCusumArlFromSample(std::span<const double> sorted_increments, double h,
                                  int cells) {
  ChainWorkspace coarse(cells + 1), fine(2 * cells + 1);
  return RichardsonArl(SampleCdf{sorted_increments}, h, 0.0, cells, coarse, fine);
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
  const ArlGap g{[&](double h) {
                   return RichardsonArl(cdf, h, 0.0, kCells, coarse, fine);
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
  ChainWorkspace coarse(kCells + 1), fine(2 * kCells + 1);
  const ArlGap g{[&](double h) {
                   return RichardsonArl(SampleCdf{increments}, h, 0.0, kCells, coarse, fine);
                 },
                 std::log(arl0)};
  const double g_low = g(h_floor);
  if (g_low >= 0) return h_floor;
  const double g_high = g(h_ceiling);
  if (g_high < 0) return h_ceiling;
  return CloseIn(g, h_floor, g_low, h_ceiling, g_high, 1e-2);
}

}  // namespace plumbline
