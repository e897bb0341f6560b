// ResidualScale: a robust running estimate of the residual standard deviation,
// so one outlier cannot inflate the scale for long. Not thread-safe; owned by
// one shard.
//
// Input: u_t = e_t / sqrt(1 + v_t), the one-step residual divided by its
// parameter-uncertainty factor (see SeasonalForecaster), which has variance
// sigma^2 when the model holds.
//
// Estimator (Huber-type clipped second moment; Huber 1981, "Robust Statistics",
// Wiley, ch. 5, for the clipping idea; the running form is common practice):
//
//   s2_t = (1 - a_t) s2_{t-1} + a_t * min(u_t^2, c^2 sigma_{t-1}^2) / m(c)
//   m(c) = E[min(Z^2, c^2)], Z ~ N(0,1)
//        = (2 Phi(c) - 1) - 2 c phi(c) + 2 c^2 (1 - Phi(c))      (0.99501 at c = 3)
//   a_t = 1 / min(t, window)            (a plain mean until `window` readings)
//   sigma_t = max(sqrt(s2_t), floor)
//
// Dividing by m(c) makes s2 unbiased for sigma^2 under normal residuals, up to a
// small second-order effect of clipping at the estimate's own fluctuating value
// (s2 averages 0.5% low at window 500; tests/detectors/residual_scale_test.cc).
// A single spike moves s2 by at most a c^2 sigma^2 / m(c), i.e. by at most
// 9/window of itself at c = 3. The first `start` residuals are combined by their
// median absolute value (MAD / 0.6745) before clipping begins, so early misfit
// does not lock in.
//
// Parameters: window 100-1000 readings (longer = steadier, slower to follow a
// genuine variance change, which the variance detector reports anyway); clip 2.5-4.
#pragma once

#include <array>
#include <string>

#include "detectors/snapshot.h"

namespace plumbline {

struct ResidualScaleOptions {
  int window = 500;          // readings, [10, 1e6]
  double clip = 3.0;         // in standard deviations, [1.5, 10]
  double floor = 1e-12;      // smallest sigma reported, > 0 (in units of the residual)

  bool IsValid(std::string* why) const;
};

class ResidualScale {
 public:
  explicit ResidualScale(const ResidualScaleOptions& options);

  // Folds in a residual. Non-finite input is ignored (returns false).
  bool Update(double u);
  // The current estimate; 0 before any residual.
  double sigma() const { return sigma_; }
  long long count() const { return count_; }
  // Restarts the running mean so the scale re-learns quickly (after a variance
  // change), keeping the current value as the starting point.
  void Restart(int effective_count);
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

  // m(c) above.
  static double ClippedSecondMoment(double clip);

 private:
  static constexpr int kStart = 5;  // residuals combined by median before clipping
  ResidualScaleOptions options_;
  double correction_;                // 1 / m(c)
  double s2_ = 0.0;
  double sigma_ = 0.0;
  long long count_ = 0;
  int effective_ = 0;                // readings in the running mean, capped at window
  std::array<double, kStart> first_{};
};

}  // namespace plumbline
