// ResidualWhitener: removes short-range autocorrelation from a series'
// residuals, in continuous time, so the change detectors see approximately
// independent innovations. Not thread-safe; owned by one series' monitor.
//
// Model: a residual u_t is an Ornstein-Uhlenbeck process s plus independent
// measurement noise w (an AR(1) plus white noise, i.e. an ARMA(1,1) at regular
// spacing; Box, Jenkins & Reinsel, "Time Series Analysis", 4th ed., section
// 4.3.3 and appendix A4.4, for the sum of an AR(1) and white noise):
//
//   s_t = phi^L s_{t-1} + e_t,   L = (t - t_prev) / mean gap,
//   var(s) = c g0,   var(w) = (1 - c) g0,   g0 = var(u).
//
// A sensor with a slowly wandering error plus fast read noise has exactly this
// shape, and so do residuals whose smooth seasonal fit misses slow structure.
// Its autocorrelation is rho(k) = c phi^k for k >= 1, so the moments at one
// and two mean gaps give both parameters: phi = rho2 / rho1, c = rho1 / phi.
// When rho2 <= rho1^2 the data look like a pure AR(1) (c = 1, phi = rho1),
// which is the previous model and the usual case for a well-fitted series.
//
// Whitening is the model's Kalman filter (Harvey 1989, "Forecasting,
// Structural Time Series Models and the Kalman Filter", section 3.2; MEM),
// run on u / sqrt(g0) so its variances are fractions of g0:
//
//   predict   m- = phi^L m,   P- = phi^2L P + c (1 - phi^2L)
//   innovate  e = u - m-,     F = P- + (1 - c)
//   update    K = P- / F,     m = m- + K e,   P = P- (1 - K)
//   output    a = e / sqrt(F)   (variance g0 whatever the gap)
//
// With c = 1 this is a = (u - phi^L u_prev) / sqrt(1 - phi^2L): the plain
// continuous-time AR(1) whitening. A lasting step of size d in u reaches the
// output as a step of d * StepResponse() once the filter settles (the first
// innovations carry more of it; MeanStepResponse(n) averages the first n),
// which the monitor uses to turn a detector's shift estimate back into units.
//
// Estimation: running means over the last ~kWindow in-control residuals of
// u_t u_{t-1}, u_t u_{t-2} and u_t^2, each residual Huber-clipped at 3 sigma so
// a spike cannot fake a correlation; pairs more than kMaxLags mean gaps apart
// are not used. The correlations are shrunk toward zero while few pairs are in
// (n / (n + 20)), phi is kept in [0, kMaxPhi] (an OU correlation is positive,
// and a cap below 1 keeps the whitening from blinding the detectors), and c is
// trusted only once rho1 clears kMinRho (below it the pure AR(1) form is used:
// the lag-two moment is then too noisy to split signal from noise).
#pragma once

#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

class ResidualWhitener {
 public:
  static constexpr int kWindow = 5000;     // residuals in the running moments
  static constexpr double kMaxLags = 3.0;  // pairs further apart do not inform
  static constexpr double kMaxPhi = 0.98;
  static constexpr double kMinRho = 0.1;
  static constexpr double kMinSpread = 1e-2;  // innovation variance floor, fraction of g0

  // Whitens u observed at t; mean_gap (same unit as t, > 0) sets the lag unit.
  // With learn, u also updates the moment estimates; sigma (> 0) is the
  // current residual scale, used to clip. Returns u unchanged until a mean gap
  // is known.
  double Whiten(EventTime t, double u, double mean_gap, double sigma, bool learn);

  // Forgets the filter's state (not the learned correlation): the next
  // residual is taken as it stands, as after a long gap.
  void Restart();

  double lag1() const { return rho1_; }        // estimated correlation at one mean gap
  double persistence() const { return phi_; }  // phi
  double signal_share() const { return c_; }   // c
  // Steady-state output step per unit step in u (see above), in (0, 1]
  // relative to sqrt(g0) units: a lasting shift d in u shows in the output as
  // d * StepResponse() after the filter settles.
  double StepResponse() const;
  // The mean output per unit step in u over the first n >= 1 observations at
  // or after the step (one mean gap apart, the filter in its steady state):
  // the first innovations carry more of a step than the settled
  // StepResponse(), so a detector's shift estimate, the mean of its input
  // since the change, divided by this is the step in u.
  double MeanStepResponse(long long n) const;
  // Checkpoints (detectors/snapshot.h): Load overwrites the whole state.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

 private:
  struct SteadyState {
    double gain = 1.0;    // K
    double spread = 1.0;  // F, a fraction of g0
  };
  SteadyState Steady() const;
  void Learn(double x2, double x1, double u, bool have_two);
  void Refit();

  // Filter state (fractions of g0).
  bool has_previous_ = false;
  EventTime previous_time_ = 0;
  double state_mean_ = 0.0;
  double state_variance_ = 1.0;
  // Last two raw residuals (clipped) for the moments, with their lags.
  double u1_ = 0.0, u2_ = 0.0;
  double lags1_ = 0.0;  // mean gaps between u2_ and u1_
  bool has_u2_ = false;
  // Running moments.
  long long pairs_ = 0, triples_ = 0;
  double square_ = 0.0, cross1_ = 0.0, cross2_ = 0.0, square2_ = 0.0;
  double rho1_ = 0.0;
  double phi_ = 0.0;
  double c_ = 1.0;
};

}  // namespace plumbline
