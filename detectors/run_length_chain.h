// Average run lengths of one-sided CUSUMs with arbitrary increments, by the
// Markov-chain method of Brook & Evans (1972), "An approach to the probability
// distribution of CUSUM run length", Biometrika 59:539-548. Pure functions;
// thread-safe.
//
//   S_0 = s,  S_t = max(0, S_{t-1} + Y_t),  signal when S_t > h,  Y_t i.i.d. with CDF F
//
// [0, h] is cut into m + 1 cells of width w = h / (m + 1/2): cell 0 = [0, w/2)
// (which holds the atom at 0), cell j = [(j - 1/2) w, (j + 1/2) w). The chain moves
// from cell i (represented by S = i w) to cell j with probability
// F((j + 1/2) w - i w) - F((j - 1/2) w - i w) (cell 0: F(w/2 - i w)), and the
// ARL vector solves (I - R) L = 1 (in O(m^2): R is Toeplitz but for its first
// column; run_length_chain.cc). The error is O(1/m^2), so two chains (m and
// 2m) are combined by Richardson extrapolation: L = (4 L_2m - L_m) / 3.
//
// Used for the rate detector (exponential inter-arrival increments: Vardeman &
// Ray 1985, Technometrics 27:145-150; Gan 1992, Statistica Sinica 2:297-312) and
// the variance detector (capped chi-square increments); checked against the
// exact values in REFERENCES.md section 7.2.
#pragma once

#include <functional>
#include <span>
#include <vector>

#include "detectors/status.h"

namespace plumbline {

// F(y) = P(Y <= y) for the increment Y (must be a non-decreasing CDF).
using IncrementCdf = std::function<double(double)>;

// ARL of the one-sided CUSUM above started at `start` in [0, h). cells >= 20.
double OneSidedCusumArl(const IncrementCdf& cdf, double h, double start = 0.0,
                        int cells = 150);

// The smallest h (to within 1e-4 relative) whose zero-start ARL reaches arl0.
// Fails when arl0 cannot be reached below h_max.
StatusOr<double> CalibrateOneSidedCusum(const IncrementCdf& cdf, double arl0,
                                        double h_max = 1000.0);

// The empirical CDF of a sorted sample at y: the share of values <= y (a
// binary search).
double EmpiricalCdf(std::span<const double> sorted, double y);

// OneSidedCusumArl (start 0) for the empirical CDF of a sorted sample, equal
// bit for bit to it with cdf = EmpiricalCdf(sorted_increments, .).
double OneSidedCusumArlFromSample(std::span<const double> sorted_increments, double h,
                                  int cells = 150);

// The same calibration for increments whose distribution is known only by a
// sample (the empirical CDF of `increments`, at least 100 values), with h held
// in [h_floor, h_ceiling]. Used after warmup to re-fit a detector's threshold
// to the residuals a series really produces (heavy tails, bursty arrivals).
StatusOr<double> CalibrateOneSidedCusumFromSample(std::vector<double> increments,
                                                  double arl0, double h_floor,
                                                  double h_ceiling);

}  // namespace plumbline
