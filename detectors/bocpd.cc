#include "detectors/bocpd.h"

#include <math.h>  // lgamma_r: std::lgamma may write the global signgam

#include <algorithm>
#include <cmath>
#include <cstring>
#include <limits>
#include <numbers>
#include <string>

namespace plumbline {

bool BocpdOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why != nullptr) *why = message;
    return false;
  };
  if (!(std::isfinite(mu0) && std::abs(mu0) <= kBocpdMaxAbsReading)) {
    return fail("mu0 must be finite with |mu0| <= 1e100");
  }
  if (!(kappa0 > 0.0 && kappa0 <= 1e9)) return fail("kappa0 must be in (0, 1e9]");
  if (!(alpha0 > 0.0 && alpha0 <= 1e9)) return fail("alpha0 must be in (0, 1e9]");
  if (!(beta0 >= 1e-300 && beta0 <= 1e300))
    return fail("beta0 must be in [1e-300, 1e300]");
  if (!(hazard > 0.0 && hazard <= 0.5)) return fail("hazard must be in (0, 0.5]");
  if (!(max_run_length >= 2 && max_run_length <= 1000000)) {
    return fail("max_run_length must be in [2, 1000000]");
  }
  if (!(prune_tolerance >= 0.0 && prune_tolerance <= 1e-3)) {
    return fail("prune_tolerance must be in [0, 1e-3] (0 disables pruning)");
  }
  if (!(window >= 1 && window < max_run_length)) {
    return fail("window must be in [1, max_run_length - 1]");
  }
  if (!(threshold > 0.0 && threshold < 1.0 - hazard)) {
    return fail("threshold must be in (0, 1 - hazard)");
  }
  if (!(min_readings > window)) return fail("min_readings must be > window");
  if (!(arl0 == 0.0 || (arl0 >= 1.0 && std::isfinite(arl0)))) {
    return fail("arl0 must be 0 (not calibrated) or finite and >= 1");
  }
  return true;
}

// ---------------------------------------------------------------------------
// The update loop, vectorised.
//
// Written once with the GCC/Clang vector extension for a lane width W and
// compiled twice: W = 2 (SSE2 on any x86-64, NEON on ARM, plain code
// elsewhere) and, on x86-64, W = 4 in functions built for AVX2, chosen per
// call when the processor has AVX2. Both perform the same IEEE operations
// lane by lane (no FMA), sum in four partial sums by position modulo 4 added
// in a fixed order, and break ties by position, so they give bit-identical
// results. exp and log are our own (below) because the library's are scalar
// and the two of them are most of an update's cost.

#if defined(__x86_64__) && defined(__GNUC__)
#define PLUMBLINE_BOCPD_AVX2 1
#endif

namespace {

typedef double Lanes2 __attribute__((vector_size(16)));
typedef std::uint64_t Bits2 __attribute__((vector_size(16)));
typedef std::int64_t Mask2 __attribute__((vector_size(16)));
typedef double Lanes4 __attribute__((vector_size(32)));
typedef std::uint64_t Bits4 __attribute__((vector_size(32)));
typedef std::int64_t Mask4 __attribute__((vector_size(32)));

template <class V>
struct LaneTypes;
template <>
struct LaneTypes<Lanes2> {
  using Bits = Bits2;
  using Mask = Mask2;
  static constexpr int kWidth = 2;
};
template <>
struct LaneTypes<Lanes4> {
  using Bits = Bits4;
  using Mask = Mask4;
  static constexpr int kWidth = 4;
};

constexpr int kBlock = 4;  // elements per block: the partial sums of Weigh

// Helpers are always inlined (so they take on the instruction set of the
// function they land in) and pass vectors by reference (32-byte vectors by
// value would change the calling convention between the two builds).
#define PLUMBLINE_INLINE inline __attribute__((always_inline))

template <class V>
PLUMBLINE_INLINE void Load(const double* p, V& v) {
  std::memcpy(&v, p, sizeof v);
}
template <class V>
PLUMBLINE_INLINE void Store(double* p, const V& v) {
  std::memcpy(p, &v, sizeof v);
}
template <class V>
PLUMBLINE_INLINE void Broadcast(double x, V& v) {
  for (int lane = 0; lane < LaneTypes<V>::kWidth; ++lane) v[lane] = x;
}
// Lane-wise mask ? a : b (mask lanes all ones or all zeros) in bit operations,
// which every instruction set has.
template <class V, class M>
PLUMBLINE_INLINE void Select(const M& mask, const V& a, const V& b, V& out) {
  using Bits = typename LaneTypes<V>::Bits;
  const Bits m = (Bits)mask;
  out = (V)(((Bits)a & m) | ((Bits)b & ~m));
}

// ln 2 split so that k * kLn2Hi is exact for |k| < 2^20 (Cody and Waite).
constexpr double kLn2Hi = 0x1.62e42feep-1;
constexpr double kLn2Lo = 0x1.a39ef35793c76p-33;

// e^x for x <= 0, 0 below -708. Range reduction x = k ln 2 + r, |r| <= ln2/2,
// with k found by the round-to-nearest shifter trick; e^r by its Taylor series
// to degree 12 (truncation error < 2e-17 relative), Estrin's scheme; 2^k put
// straight into the exponent bits. Error within a few ulps.
template <class V>
PLUMBLINE_INLINE void VectorExp(const V& x, V& result) {
  using Bits = typename LaneTypes<V>::Bits;
  constexpr double kShifter = 0x1.8p52;
  V k = x * 1.4426950408889634 + kShifter;
  const Bits k_bits = (Bits)k;
  k -= kShifter;
  const V r = (x - k * kLn2Hi) - k * kLn2Lo;
  const V r2 = r * r, r4 = r2 * r2, r8 = r4 * r4;
  const V p01 = 1.0 + r;
  const V p23 = 1.0 / 2 + r * (1.0 / 6);
  const V p45 = 1.0 / 24 + r * (1.0 / 120);
  const V p67 = 1.0 / 720 + r * (1.0 / 5040);
  const V p89 = 1.0 / 40320 + r * (1.0 / 362880);
  const V p1011 = 1.0 / 3628800 + r * (1.0 / 39916800);
  const V p = (p01 + r2 * p23) + r4 * (p45 + r2 * p67) +
              r8 * ((p89 + r2 * p1011) + r4 * (1.0 / 479001600));
  const V scaled = (V)((Bits)p + (k_bits << 52));
  const V zero = {};
  Select(x < -708.0, zero, scaled, result);
}

// log y for positive normal y. y = 2^e m with m in [sqrt(1/2), sqrt(2)),
// log m = 2 atanh(s) with s = (m - 1)/(m + 1), |s| < 0.1716, by its series
// 2 s (1 + s^2/3 + ... + s^20/21) (truncation error < 3e-17 relative).
// Error within a few ulps.
template <class V>
PLUMBLINE_INLINE void VectorLog(const V& y, V& result) {
  using Bits = typename LaneTypes<V>::Bits;
  const Bits bits = (Bits)y;
  // Exponent field as a double, via the 2^52 trick (no 64-bit int conversion).
  V e = (V)((bits >> 52) | 0x4330000000000000ULL) - (0x1p52 + 1023.0);
  V m = (V)((bits & 0x000FFFFFFFFFFFFFULL) | 0x3FF0000000000000ULL);
  const auto big = m > 1.4142135623730951;
  const V half_m = m * 0.5, next_e = e + 1.0;
  Select(big, half_m, m, m);
  Select(big, next_e, e, e);
  const V f = m - 1.0;  // exact
  const V s = f / (2.0 + f);
  const V z = s * s, z2 = z * z, z4 = z2 * z2, z8 = z4 * z4;
  const V q = ((1.0 + z * (1.0 / 3)) + z2 * (1.0 / 5 + z * (1.0 / 7))) +
              z4 * ((1.0 / 9 + z * (1.0 / 11)) + z2 * (1.0 / 13 + z * (1.0 / 15))) +
              z8 * ((1.0 / 17 + z * (1.0 / 19)) + z2 * (1.0 / 21));
  result = e * kLn2Hi + (2.0 * s * q + e * kLn2Lo);
}

// The arrays of one update, all of length n (states oldest first).
struct ScoreArrays {
  double* mu;
  double* beta;
  double* log_beta;
  const double* alpha;
  const double* half_ratio;
  const double* step;
  const double* log_norm;
  double* log_pred;
};

// W states of ScoreAndAdvance at offset i; raises `top` to their largest log
// predictive.
template <class V>
PLUMBLINE_INLINE void ScoreLanes(double x, const ScoreArrays& a, std::size_t i, V& top) {
  V mu, beta, log_beta, alpha, half_ratio, step, log_norm;
  Load(a.mu + i, mu);
  Load(a.beta + i, beta);
  Load(a.log_beta + i, log_beta);
  Load(a.alpha + i, alpha);
  Load(a.half_ratio + i, half_ratio);
  Load(a.step + i, step);
  Load(a.log_norm + i, log_norm);
  const V d = x - mu;
  const V next_beta = beta + half_ratio * (d * d);
  V next_log_beta;
  VectorLog(next_beta, next_log_beta);
  const V log_pred = log_norm + alpha * log_beta - (alpha + 0.5) * next_log_beta;
  Store(a.mu + i, mu + d * step);
  Store(a.beta + i, next_beta);
  Store(a.log_beta + i, next_log_beta);
  Store(a.log_pred + i, log_pred);
  Select(log_pred > top, log_pred, top, top);
}

// Scores x under each state (log predictive), advances each state's
// statistics by x, and returns the largest log predictive.
template <class V>
PLUMBLINE_INLINE double ScoreAndAdvanceLanes(double x, std::size_t n,
                                             const ScoreArrays& a) {
  constexpr int kWidth = LaneTypes<V>::kWidth;
  V top;
  Broadcast(-std::numeric_limits<double>::infinity(), top);
  std::size_t i = 0;
  for (; i + kWidth <= n; i += kWidth) ScoreLanes(x, a, i, top);
  if (i < n) {
    // Tail: pad a local block by repeating the last state, then copy back.
    double buffer[8][kWidth];
    const double* sources[8] = {a.mu + i,       a.beta + i,       a.log_beta + i,
                                a.alpha + i,    a.half_ratio + i, a.step + i,
                                a.log_norm + i, a.log_pred + i};
    for (int k = 0; k < 8; ++k) {
      for (std::size_t lane = 0; lane < kWidth; ++lane) {
        buffer[k][lane] = sources[k][std::min(lane, n - 1 - i)];
      }
    }
    const ScoreArrays local{buffer[0], buffer[1], buffer[2], buffer[3],
                            buffer[4], buffer[5], buffer[6], buffer[7]};
    ScoreLanes(x, local, 0, top);
    double* targets[4] = {a.mu + i, a.beta + i, a.log_beta + i, a.log_pred + i};
    const int written[4] = {0, 1, 2, 7};
    for (int k = 0; k < 4; ++k) {
      std::memcpy(targets[k], buffer[written[k]], (n - i) * sizeof(double));
    }
  }
  double best = top[0];
  for (int lane = 1; lane < kWidth; ++lane) best = std::max(best, top[lane]);
  return best;
}

// weight = prob * exp(log_pred - top); returns the sum of the weights, kept
// as four partial sums by position modulo 4 and added in a fixed order.
template <class V>
PLUMBLINE_INLINE double WeighLanes(std::size_t n, const double* prob,
                                   const double* log_pred, double top, double* weight) {
  constexpr int kWidth = LaneTypes<V>::kWidth;
  constexpr int kParts = kBlock / kWidth;
  V sum[kParts] = {};
  V p, l, e;
  std::size_t i = 0;
  for (; i + kBlock <= n; i += kBlock) {
    for (int part = 0; part < kParts; ++part) {
      Load(prob + i + part * kWidth, p);
      Load(log_pred + i + part * kWidth, l);
      VectorExp(l - top, e);
      const V w = p * e;
      Store(weight + i + part * kWidth, w);
      sum[part] += w;
    }
  }
  if (i < n) {
    // Tail: pad with zero mass.
    double padded_prob[kBlock] = {}, padded_log_pred[kBlock] = {top, top, top, top};
    double padded_weight[kBlock];
    std::memcpy(padded_prob, prob + i, (n - i) * sizeof(double));
    std::memcpy(padded_log_pred, log_pred + i, (n - i) * sizeof(double));
    for (int part = 0; part < kParts; ++part) {
      Load(padded_prob + part * kWidth, p);
      Load(padded_log_pred + part * kWidth, l);
      VectorExp(l - top, e);
      const V w = p * e;
      Store(padded_weight + part * kWidth, w);
      sum[part] += w;
    }
    std::memcpy(weight + i, padded_weight, (n - i) * sizeof(double));
  }
  double partial[kBlock];
  std::memcpy(partial, sum, sizeof partial);
  return (partial[0] + partial[1]) + (partial[2] + partial[3]);
}

struct NormaliseResult {
  double max = 0.0;
  std::size_t argmax = 0;  // last position holding max
  std::size_t below = 0;   // entries < tolerance
};

// prob = weight * scale, with the maximum, its last position, and the number
// of entries below tolerance. Eight elements per step in independent lane
// sets, so that the compare-and-select chains overlap.
template <class V>
PLUMBLINE_INLINE NormaliseResult NormaliseLanes(std::size_t n, const double* weight,
                                                double scale, double tolerance,
                                                double* prob) {
  using Mask = typename LaneTypes<V>::Mask;
  constexpr int kWidth = LaneTypes<V>::kWidth;
  constexpr int kStep = 8;
  constexpr int kSets = kStep / kWidth;
  V best[kSets], best_at[kSets], at[kSets];
  for (int k = 0; k < kSets; ++k) {
    Broadcast(-1.0, best[k]);
    Broadcast(0.0, best_at[k]);
    for (int lane = 0; lane < kWidth; ++lane) at[k][lane] = k * kWidth + lane;
  }
  Mask below = {};
  std::size_t i = 0;
  for (; i + kStep <= n; i += kStep) {
    for (int k = 0; k < kSets; ++k) {
      V w;
      Load(weight + i + k * kWidth, w);
      const V p = w * scale;
      Store(prob + i + k * kWidth, p);
      const Mask higher = p >= best[k];
      Select(higher, p, best[k], best[k]);
      Select(higher, at[k], best_at[k], best_at[k]);
      below -= p < tolerance;  // a true comparison is -1
      at[k] += kStep;
    }
  }
  NormaliseResult result;
  result.max = -1.0;
  for (int k = 0; k < kSets; ++k) {
    for (int lane = 0; lane < kWidth; ++lane) {
      const auto position = static_cast<std::size_t>(best_at[k][lane]);
      if (best[k][lane] > result.max ||
          (best[k][lane] == result.max && position > result.argmax)) {
        result.max = best[k][lane];
        result.argmax = position;
      }
    }
  }
  for (int lane = 0; lane < kWidth; ++lane)
    result.below += static_cast<std::size_t>(below[lane]);
  for (; i < n; ++i) {
    const double p = weight[i] * scale;
    prob[i] = p;
    if (p >= result.max) {
      result.max = p;
      result.argmax = i;
    }
    result.below += p < tolerance ? 1 : 0;
  }
  return result;
}

#ifdef PLUMBLINE_BOCPD_AVX2
__attribute__((target("avx2"))) double ScoreAndAdvanceAvx2(double x, std::size_t n,
                                                           const ScoreArrays& a) {
  return ScoreAndAdvanceLanes<Lanes4>(x, n, a);
}
__attribute__((target("avx2"))) double WeighAvx2(std::size_t n, const double* prob,
                                                 const double* log_pred, double top,
                                                 double* weight) {
  return WeighLanes<Lanes4>(n, prob, log_pred, top, weight);
}
__attribute__((target("avx2"))) NormaliseResult NormaliseAvx2(
    std::size_t n, const double* weight, double scale, double tolerance, double* prob) {
  return NormaliseLanes<Lanes4>(n, weight, scale, tolerance, prob);
}
bool HasAvx2() { return __builtin_cpu_supports("avx2"); }
#endif

double ScoreAndAdvance(double x, std::size_t n, const ScoreArrays& a) {
#ifdef PLUMBLINE_BOCPD_AVX2
  if (HasAvx2()) return ScoreAndAdvanceAvx2(x, n, a);
#endif
  return ScoreAndAdvanceLanes<Lanes2>(x, n, a);
}

double Weigh(std::size_t n, const double* prob, const double* log_pred, double top,
             double* weight) {
#ifdef PLUMBLINE_BOCPD_AVX2
  if (HasAvx2()) return WeighAvx2(n, prob, log_pred, top, weight);
#endif
  return WeighLanes<Lanes2>(n, prob, log_pred, top, weight);
}

NormaliseResult Normalise(std::size_t n, const double* weight, double scale,
                          double tolerance, double* prob) {
#ifdef PLUMBLINE_BOCPD_AVX2
  if (HasAvx2()) return NormaliseAvx2(n, weight, scale, tolerance, prob);
#endif
  return NormaliseLanes<Lanes2>(n, weight, scale, tolerance, prob);
}

#undef PLUMBLINE_INLINE

// log Gamma(a) for a > 0, thread-safe (lgamma_r does not touch signgam).
double LogGamma(double a) {
  int sign = 0;
  return ::lgamma_r(a, &sign);
}

}  // namespace

namespace bocpd_internal {

double FastExp(double x) {
  Lanes2 result;
  VectorExp(Lanes2{x, x}, result);
  return result[0];
}

double FastLog(double x) {
  Lanes2 result;
  VectorLog(Lanes2{x, x}, result);
  return result[0];
}

}  // namespace bocpd_internal

// ---------------------------------------------------------------------------
// RunLengthPosterior

RunLengthPosterior::RunLengthPosterior(const BocpdOptions& options)
    : mu0_(options.mu0),
      kappa0_(options.kappa0),
      alpha0_(options.alpha0),
      beta0_(options.beta0),
      log_beta0_(std::log(options.beta0)),
      hazard_(options.hazard),
      tolerance_(options.prune_tolerance),
      cap_(options.max_run_length) {
  const auto states = static_cast<std::size_t>(cap_) + 1;
  alpha_by_age_.resize(states);
  half_ratio_by_age_.resize(states);
  step_by_age_.resize(states);
  log_norm_by_age_.resize(states);
  for (std::size_t age = 0; age < states; ++age) {
    const double n = static_cast<double>(cap_) - static_cast<double>(age);
    const double kappa = kappa0_ + n;
    const double alpha = alpha0_ + 0.5 * n;
    alpha_by_age_[age] = alpha;
    half_ratio_by_age_[age] = kappa / (2.0 * (kappa + 1.0));
    step_by_age_[age] = 1.0 / (kappa + 1.0);
    log_norm_by_age_[age] =
        LogGamma(alpha + 0.5) - LogGamma(alpha) -
        0.5 * std::log(2.0 * std::numbers::pi * (kappa + 1.0) / kappa);
  }
  const std::size_t slots = 2 * states + 1;
  mu_.resize(slots);
  beta_.resize(slots);
  log_beta_.resize(slots);
  prob_.resize(slots);
  birth_.resize(slots);
  log_pred_.resize(states);
  weight_.resize(states);
  gather_alpha_.resize(states);
  gather_half_ratio_.resize(states);
  gather_step_.resize(states);
  gather_log_norm_.resize(states);
  recent_.resize(states);
  Reset();
}

void RunLengthPosterior::Reset() {
  begin_ = end_ = 0;
  readings_ = 0;
  log_evidence_ = 0.0;
  last_log_predictive_ = 0.0;
  map_slot_ = 0;
  AppendFreshState();
  prob_[begin_] = 1.0;  // P(r_0 = 0) = 1
}

void RunLengthPosterior::AppendFreshState() {
  if (end_ == prob_.size()) {
    // Move the block back to slot 0 (happens about once every R updates).
    const std::size_t n = end_ - begin_;
    auto move_back = [&](auto& v) {
      std::copy(v.begin() + static_cast<std::ptrdiff_t>(begin_),
                v.begin() + static_cast<std::ptrdiff_t>(end_), v.begin());
    };
    move_back(mu_);
    move_back(beta_);
    move_back(log_beta_);
    move_back(prob_);
    move_back(birth_);
    map_slot_ -= begin_;
    begin_ = 0;
    end_ = n;
  }
  mu_[end_] = mu0_;
  beta_[end_] = beta0_;
  log_beta_[end_] = log_beta0_;
  prob_[end_] = hazard_;
  birth_[end_] = readings_;
  ++end_;
}

void RunLengthPosterior::Update(double x) {
  const std::size_t n = end_ - begin_;
  const std::size_t b = begin_;

  // Per-state constants: a slice of the tables when the held run lengths are
  // consecutive (no pruning gaps), else gathered.
  const std::int64_t oldest = readings_ - birth_[b];  // readings held by the oldest state
  ScoreArrays arrays{&mu_[b], &beta_[b], &log_beta_[b], nullptr,
                     nullptr, nullptr,   nullptr,       log_pred_.data()};
  if (oldest == static_cast<std::int64_t>(n) - 1) {
    const std::size_t age = static_cast<std::size_t>(cap_ - oldest);
    arrays.alpha = &alpha_by_age_[age];
    arrays.half_ratio = &half_ratio_by_age_[age];
    arrays.step = &step_by_age_[age];
    arrays.log_norm = &log_norm_by_age_[age];
  } else {
    for (std::size_t i = 0; i < n; ++i) {
      const auto age = static_cast<std::size_t>(cap_ - (readings_ - birth_[b + i]));
      gather_alpha_[i] = alpha_by_age_[age];
      gather_half_ratio_[i] = half_ratio_by_age_[age];
      gather_step_[i] = step_by_age_[age];
      gather_log_norm_[i] = log_norm_by_age_[age];
    }
    arrays.alpha = gather_alpha_.data();
    arrays.half_ratio = gather_half_ratio_.data();
    arrays.step = gather_step_.data();
    arrays.log_norm = gather_log_norm_.data();
  }

  // w_j = P(j) pi_j(x), scaled by exp(-top); their sum is p(x | past) e^-top.
  const double top = ScoreAndAdvance(x, n, arrays);
  double sum = Weigh(n, &prob_[b], log_pred_.data(), top, weight_.data());
  double log_scale = top;
  if (!(sum >= std::numeric_limits<double>::min())) {
    // Every state both improbable and far off: redo the weights in logs.
    double best = -std::numeric_limits<double>::infinity();
    for (std::size_t i = 0; i < n; ++i) {
      weight_[i] = std::log(prob_[b + i]) + log_pred_[i];
      best = std::max(best, weight_[i]);
    }
    sum = 0.0;
    for (std::size_t i = 0; i < n; ++i) {
      weight_[i] = std::exp(weight_[i] - best);
      sum += weight_[i];
    }
    log_scale = best;
  }
  last_log_predictive_ = log_scale + std::log(sum);
  log_evidence_ += last_log_predictive_;

  // Growth: P(j + 1) = (1 - H) w_j / sum. (P(0) = H is appended below.)
  const NormaliseResult normalised =
      Normalise(n, weight_.data(), (1.0 - hazard_) / sum, tolerance_, &prob_[b]);
  map_slot_ = b + normalised.argmax;

  ++readings_;
  recent_[static_cast<std::size_t>(readings_ % (cap_ + 1))] = x;

  // Cap: the oldest state has grown past R.
  if (readings_ - birth_[b] > cap_) {
    if (n >= 2 && readings_ - birth_[b + 1] == cap_) {
      // Both now hold the last R readings: merge (keep b + 1's statistics).
      prob_[b + 1] += prob_[b];
      if (map_slot_ == b || prob_[b + 1] > prob_[map_slot_]) map_slot_ = b + 1;
      ++begin_;
    } else {
      SlideCapState(b);
    }
  }

  if (tolerance_ > 0.0 && normalised.below > 0) Prune();
  AppendFreshState();
}

void RunLengthPosterior::SlideCapState(std::size_t slot) {
  // The state holds x_{t-R}..x_t; give back x_{t-R}, the reverse of the
  // conjugate update with kappa' = kappa0 + R + 1.
  const double y = recent_[static_cast<std::size_t>((readings_ - cap_) % (cap_ + 1))];
  const double kappa_full = kappa0_ + static_cast<double>(cap_) + 1.0;
  const double mu = (kappa_full * mu_[slot] - y) / (kappa_full - 1.0);
  const double d = y - mu;
  const double beta = beta_[slot] - (kappa_full - 1.0) * d * d / (2.0 * kappa_full);
  mu_[slot] = mu;
  beta_[slot] = std::max(beta, beta0_);  // beta >= beta0 exactly; guard rounding
  log_beta_[slot] = std::log(beta_[slot]);
  ++birth_[slot];
}

void RunLengthPosterior::Prune() {
  // Drop states j >= 1 below the tolerance, keeping the most probable, and
  // rescale the rest to 1 - H.
  std::size_t write = begin_;
  double kept = 0.0;
  std::size_t map_slot = begin_;
  for (std::size_t read = begin_; read < end_; ++read) {
    if (prob_[read] < tolerance_ && read != map_slot_) continue;
    if (read == map_slot_) map_slot = write;
    mu_[write] = mu_[read];
    beta_[write] = beta_[read];
    log_beta_[write] = log_beta_[read];
    prob_[write] = prob_[read];
    birth_[write] = birth_[read];
    kept += prob_[write];
    ++write;
  }
  end_ = write;
  map_slot_ = map_slot;
  const double scale = (1.0 - hazard_) / kept;
  for (std::size_t i = begin_; i < end_; ++i) prob_[i] *= scale;
}

int RunLengthPosterior::run_length(int i) const {
  return static_cast<int>(readings_ - birth_[Slot(i)]);
}

double RunLengthPosterior::probability(int i) const { return prob_[Slot(i)]; }

double RunLengthPosterior::mean(int i) const { return mu_[Slot(i)]; }

double RunLengthPosterior::variance(int i) const {
  const std::size_t slot = Slot(i);
  const double n = static_cast<double>(readings_ - birth_[slot]);
  return beta_[slot] / (alpha0_ + 0.5 * n);
}

double RunLengthPosterior::ProbabilityOf(int run_length) const {
  // Run lengths increase with i: binary search.
  int lo = 0, hi = size() - 1;
  while (lo <= hi) {
    const int mid = lo + (hi - lo) / 2;
    const int r = this->run_length(mid);
    if (r == run_length) return probability(mid);
    if (r < run_length) {
      lo = mid + 1;
    } else {
      hi = mid - 1;
    }
  }
  return 0.0;
}

double RunLengthPosterior::ProbabilityWithin(int w) const {
  double total = 0.0;
  for (int i = 1; i < size() && run_length(i) <= w; ++i) total += probability(i);
  return total;
}

int RunLengthPosterior::MostProbableRunIndex() const {
  if (readings_ == 0) return -1;
  return static_cast<int>(end_ - 1 - map_slot_);
}

int RunLengthPosterior::MapRunLength() const {
  if (readings_ == 0 || prob_[map_slot_] <= probability(0)) return 0;
  return MostProbableRunIndex() >= 0 ? run_length(MostProbableRunIndex()) : 0;
}

double RunLengthPosterior::MapProbability() const {
  if (readings_ == 0) return 1.0;
  return std::max(prob_[map_slot_], probability(0));
}

double RunLengthPosterior::MeanRunLength() const {
  double total = 0.0;
  for (int i = 1; i < size(); ++i) total += run_length(i) * probability(i);
  return total;
}

int RunLengthPosterior::MedianRunLength() const {
  double cumulative = 0.0;
  for (int i = 0; i < size(); ++i) {
    cumulative += probability(i);
    if (cumulative >= 0.5) return run_length(i);
  }
  return run_length(size() - 1);
}

// ---------------------------------------------------------------------------
// Bocpd

StatusOr<Bocpd> Bocpd::Create(const BocpdOptions& options) {
  std::string why;
  if (!options.IsValid(&why)) return Status::InvalidArgument("bocpd: " + why);
  return Bocpd(options);
}

Bocpd::Bocpd(const BocpdOptions& options)
    : options_(options),
      posterior_(options),
      times_(static_cast<std::size_t>(options.window)),
      snapshots_(static_cast<std::size_t>(options.window) + 1) {}

void Bocpd::Reset() {
  posterior_.Reset();
  std::fill(times_.begin(), times_.end(), EventTime{0});
  std::fill(snapshots_.begin(), snapshots_.end(), Snapshot{});
  change_probability_ = 0.0;
  above_ = false;
  alarms_ = 0;
}

StatusOr<Alarm> Bocpd::Update(double x, EventTime time) {
  if (!std::isfinite(x) || std::abs(x) > kBocpdMaxAbsReading) {
    return Status::InvalidArgument(
        "bocpd: reading must be finite with |x| <= 1e100, got " + std::to_string(x));
  }
  posterior_.Update(x);
  const std::int64_t t = posterior_.readings();
  times_[static_cast<std::size_t>(t % options_.window)] = time;
  const int best = posterior_.MostProbableRunIndex();
  snapshots_[static_cast<std::size_t>(t % (options_.window + 1))] =
      Snapshot{posterior_.mean(best), posterior_.variance(best)};
  change_probability_ = posterior_.ProbabilityWithin(options_.window);

  Alarm alarm;
  alarm.statistic = change_probability_;
  const bool above = armed() && change_probability_ > options_.threshold;
  if (above) {
    alarm.fired = !above_;
    const ChangeEstimate estimate = EstimateChange();
    alarm.change_at = estimate.change_at;
    alarm.direction = estimate.direction;
    alarm.shift = estimate.shift;
  }
  above_ = above;
  if (alarm.fired) ++alarms_;
  return alarm;
}

ChangeEstimate Bocpd::EstimateChange() const {
  ChangeEstimate estimate;
  const RunLengthPosterior& p = posterior_;
  int short_run = -1;
  for (int i = 1; i < p.size() && p.run_length(i) <= options_.window; ++i) {
    if (short_run < 0 || p.probability(i) > p.probability(short_run)) short_run = i;
  }
  if (short_run < 0) return estimate;
  const std::int64_t t = p.readings();
  const int s = p.run_length(short_run);
  estimate.run_length = s;
  estimate.probability = p.probability(short_run);
  estimate.change_at = times_[static_cast<std::size_t>((t - s + 1) % options_.window)];
  estimate.mean_after = p.mean(short_run);
  estimate.variance_after = p.variance(short_run);
  if (t - s == 0) {
    estimate.mean_before = options_.mu0;
    estimate.variance_before = options_.beta0 / options_.alpha0;
  } else {
    const Snapshot& before =
        snapshots_[static_cast<std::size_t>((t - s) % (options_.window + 1))];
    estimate.mean_before = before.mean;
    estimate.variance_before = before.variance;
  }
  estimate.shift = estimate.mean_after - estimate.mean_before;
  estimate.direction = estimate.shift > 0.0   ? Direction::kUp
                       : estimate.shift < 0.0 ? Direction::kDown
                                              : Direction::kNone;
  return estimate;
}

RunLengthSummary Bocpd::Summary() const {
  RunLengthSummary summary;
  summary.readings = posterior_.readings();
  summary.live_hypotheses = posterior_.size();
  summary.map_run_length = posterior_.MapRunLength();
  summary.map_probability = posterior_.MapProbability();
  summary.mean_run_length = posterior_.MeanRunLength();
  summary.median_run_length = posterior_.MedianRunLength();
  summary.change_probability = change_probability_;
  summary.cap_probability = posterior_.ProbabilityOf(posterior_.max_run_length());
  summary.armed = armed();
  return summary;
}

}  // namespace plumbline
