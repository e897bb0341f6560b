// Bocpd: Bayesian online change-point detection (Adams and MacKay 2007) on a
// stream of standardised readings, each regime modelled as a Gaussian with
// unknown mean and variance. RunLengthPosterior holds the run-length recursion;
// Bocpd adds the alarm rule and the change-time and shift estimates. Not
// thread-safe: each instance is owned by one shard (instances share nothing).
//
// Mathematics
// -----------
// Model. The stream is a sequence of runs (regimes). Within a run the readings
// are i.i.d. N(m, 1/tau); at each change (m, tau) are drawn afresh from the
// Normal-Gamma prior NG(mu0, kappa0, alpha0, beta0):
//   tau ~ Gamma(shape alpha0, rate beta0),   m | tau ~ N(mu0, 1/(kappa0 tau)).
// Before each reading a change happens with constant probability H (the
// hazard), so run lengths are geometric with mean 1/H.
//
// Run length. r_t = 0 is the fresh-prior state, which has seen no reading (a
// change right after reading t); r_t = j >= 1 means the current run holds the
// last j readings x_{t-j+1}, ..., x_t (REFERENCES.md 5.3).
//
// Conjugate update of a run's posterior by one reading x:
//   mu'    = mu + (x - mu) / (kappa + 1)
//   kappa' = kappa + 1                          so kappa_n = kappa0 + n
//   alpha' = alpha + 1/2                        so alpha_n = alpha0 + n/2
//   beta'  = beta + kappa (x - mu)^2 / (2 (kappa + 1))
// Predictive of the next reading: Student-t with nu = 2 alpha degrees of
// freedom, location mu, scale^2 = beta (kappa + 1) / (alpha kappa). Its log
// density is a difference of log marginal likelihoods:
//   log pi_n(x) = M_{n+1}(beta') - M_n(beta),  M_n(beta) = L_n - alpha_n log beta
//   L_n = lgamma(alpha_n) - lgamma(alpha0) - (n/2) log(2 pi)
//         - (1/2) log(kappa_n / kappa0)
// with beta' the updated beta (M_n + alpha0 log beta0 is the log marginal
// likelihood of the run's n readings). L_n, kappa_n and alpha_n depend on the
// run length alone and are tabulated for n = 0..R + 1 at construction.
//
// Recursion (Algorithm 1). With P_t(j) = P(r_t = j | x_1..t) and P_0(0) = 1:
//   w_j          = P_{t-1}(j) pi_j(x_t)                  for every held j
//   p(x_t | x_1..t-1) = sum_j w_j                        (evidence increment)
//   P_t(0)       = H
//   P_t(j + 1)   = (1 - H) w_j / sum_k w_k
// so P_t(0) = H exactly at every t.
//
// How it is computed. As pi telescopes along a run, each state keeps a number
// g_j, set at its birth, such that
//   log P_t(j) = g_j + M_{n_j}(beta_j) - s_t
// with s_t one number shared by all states. A reading then costs, per state,
// one logarithm and one exponential:
//   u_j = g_j + L_{n+1} - alpha_{n+1} log beta'_j     (= log w_j + s_{t-1})
//   w_j = exp(u_j - max_k u_k)                        (the w_j above, rescaled)
// and, once per reading, log p(x_t | x_1..t-1) = max_k u_k + log sum_k w_k -
// s_{t-1}; s_t = max_k u_k + log sum_k w_k - log(1 - H); a fresh state gets
// g = log H + alpha0 log beta0 + s_t; and the P_t(j + 1) are the w_j times one
// scale factor. The sum is at least 1, so neither long runs nor outliers
// underflow it; a state whose w_j underflows to 0 keeps its g and can
// recover. When |s_t| passes 1024 it is folded into every g_j, which keeps
// them small. The g_j change only then and at the cap, so rounding errors do
// not build up along a run.
//
// Bounded memory: a cap and pruning.
//  * Cap R = max_run_length. The state r = R stands for "a run of at least R
//    readings" and predicts from the statistics of the most recent R readings
//    (a sliding window). When j = R - 1 grows to R and the cap state grows
//    past R, both hold exactly the last R readings, so their masses add:
//      P_t(R) = (1 - H) (w_{R-1} + w_R) / sum_k w_k
//    and no mass is lost or renormalised (the kept state's g rises by
//    log(1 + w_R / w_{R-1})). If the state R - 1 is not held (pruned), the
//    cap state slides alone: it takes x_t and gives back x_{t-R} (the exact
//    reverse of the conjugate update), and its g is set anew so that its
//    probability is unchanged.
//  * Pruning. After each update every state j >= 1 whose posterior is below
//    prune_tolerance is dropped, except the most probable one, and the states
//    j >= 1 that remain are rescaled to sum to 1 - H (so P_t(0) = H still; a
//    change of s_t). prune_tolerance = 0 keeps every state.
// Hence at most R + 1 states are ever held. All storage is allocated at
// construction; Update allocates nothing.
//
// Decision statistic, the change probability:
//   C_t = P(1 <= r_t <= w | x_1..t) = sum_{j = 1..w} P_t(j),
// the posterior probability that the current run began at one of the last w
// readings. r = 0 is left out: it is the prior mass H on a change after the
// latest reading, which no reading has informed (it is constant).
//
// Alarm rule. The detector is armed once min_readings readings have been seen
// since construction or Reset (before t > w every run is short, so C_t is
// 1 - H whatever the data; the margin lets the first long run gather
// evidence). An armed detector fires at reading t when C_t > threshold and
// C_{t-1} <= threshold (or reading t-1 was not armed). It does not restart
// after an alarm: the posterior already follows the new run, C_t falls back
// below the threshold once that run is more than w readings old, and the next
// crossing is a new alarm. Reset() restarts from the prior.
//
// Estimates (reported in Alarm while C_t > threshold, and by EstimateChange):
//   s           = argmax_{1 <= j <= w} P_t(j)       most probable short run
//   change_at   = time of reading t - s + 1         its first reading
//   mean_after  = posterior mean mu of state s; shrunk towards mu0 by the
//                 factor s / (s + kappa0) (the model's own estimate)
//   mean_before = posterior mean of the most probable state j >= 1 as it stood
//                 after reading t - s, the regime in force just before the
//                 change (recorded at that reading, so later pruning cannot
//                 lose it); mu0 when t - s = 0
//   shift       = mean_after - mean_before;   direction up if > 0, down if < 0
// Variances are reported as beta / alpha (1 / posterior mean precision). For a
// change of variance alone the sign of the shift is noise; compare
// variance_after with variance_before instead.
//
// Assumptions: independent readings, Gaussian within a run, a memoryless
// (constant-hazard) change process. Autocorrelated or heavy-tailed residuals
// make short runs look likelier and raise the false-alarm rate; a single gross
// outlier (tens of sd) is taken as a change, since the long run's predictive
// mass vanishes and pruning then drops it. Clip residuals upstream if such
// outliers are expected.
//
// Valid ranges: see BocpdOptions; readings must be finite with |x| <= 1e100.
//
// Source: Adams, R. P. and MacKay, D. J. C. (2007), "Bayesian Online
// Changepoint Detection", arXiv:0710.3742 (Algorithm 1; REFERENCES.md 5.1).
// Normal-Gamma updates and the Student-t predictive: Murphy, K. P. (2007),
// "Conjugate Bayesian analysis of the Gaussian distribution" (REFERENCES.md
// 5.2).
//
// Choosing parameters. The defaults suit standardised residuals, in control
// about N(0, 1): mu0 = 0; kappa0 = 1 (the prior on a new regime's mean is as
// wide as one reading); alpha0 = 3, beta0 = 2, so E[sigma^2] = beta0 /
// (alpha0 - 1) = 1 with the weight of 2 alpha0 = 6 readings. hazard = 1/250 is
// the changes-per-reading rate you expect (Adams and MacKay use 1/250); it
// matters less than the threshold. window must exceed the number of readings
// the posterior needs to notice the smallest shift worth catching, or that
// change is never counted. With the defaults, by simulation (300 in-control
// readings, then the step): median delay 11 readings for a 1-sd step (90%
// within 22; 4% not caught in 200 readings), 7 for 1.5 sd, 4 for 2 sd, 3 for
// 3 sd. With window = 20 instead, 13% of 1-sd steps are never caught at a
// similar false-alarm rate, hence window = 30. Steps well under 1 sd need a
// longer window, or a CUSUM. threshold sets the false-alarm rate: 0.6 gives
// an in-control ARL0 of about 1,000 readings (simulation); the calibration
// module fills it in for a target ARL0 and records that ARL0 in arl0.
// min_readings = 2 window. max_run_length bounds memory and time per update
// (both linear in it); it also bounds how far back the long run remembers, so
// it should cover the readings you trust as a baseline (300 by default).
// prune_tolerance = 1e-10 drops at most about R * 1e-10 of posterior mass per
// update; in control almost nothing falls below it (every run length keeps
// some 1e-5 of mass), after a clear change the old long runs go.
#pragma once

#include <cstddef>
#include <cstdint>
#include <cstring>
#include <memory>
#include <new>
#include <string>
#include <vector>

#include "detectors/detection.h"
#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

// Largest accepted |reading|: keeps every squared deviation and its sum over a
// run far from overflow.
inline constexpr double kBocpdMaxAbsReading = 1e100;

struct BocpdOptions {
  // Normal-Gamma prior of a fresh run (see "Choosing parameters").
  double mu0 = 0.0;             // prior mean of a run's mean: finite, |mu0| <= 1e100
  double kappa0 = 1.0;          // prior weight of mu0, in readings: 0 < kappa0 <= 1e9
  double alpha0 = 3.0;          // prior shape of the precision: 0 < alpha0 <= 1e9
  double beta0 = 2.0;           // prior rate of the precision: 1e-300 <= beta0 <= 1e300
  double hazard = 1.0 / 250.0;  // P(change before a reading): 0 < hazard <= 0.5
  int max_run_length = 300;     // cap R on the run length: 2 <= R <= 1000000
  double prune_tolerance = 1e-10;  // drop states below this mass: 0 <= tol <= 1e-3
  int window = 30;                 // w, readings counted as "recent": 1 <= w < R
  double threshold = 0.6;  // alarm when C_t > threshold: 0 < threshold < 1 - hazard
  int min_readings = 60;   // readings before the alarm arms: w < min_readings
  // In-control ARL the threshold was calibrated for; 0 = not calibrated.
  double arl0 = 0.0;

  // True when every option is in range. Otherwise false, and *why (if not null)
  // names the first bad option and its valid range.
  bool IsValid(std::string* why) const;
};

namespace bocpd_internal {

// Instruction sets the update loop is compiled for (see bocpd.cc): kPortable
// (2 lanes; SSE2, NEON or plain code; no fused multiply-add), kAvx2 (4 lanes,
// x86-64 with AVX2 and FMA) and kAvx512 (8 lanes, x86-64 with AVX-512F). kAvx2
// and kAvx512 give bit-identical results; kPortable agrees with them to
// rounding, not bit for bit.
enum class Isa { kPortable, kAvx2, kAvx512 };

// True when this processor (and build) can run `isa`.
bool Supported(Isa isa);
// The widest supported instruction set: what RunLengthPosterior uses.
Isa BestIsa();

// The vectorised exp and log of the update loop on `isa` (must be
// Supported), one value at a time, for tests. FastExp: x <= 0 (0 below -708).
// FastLog: positive normal x below 1.3e308.
double FastExp(double x, Isa isa = BestIsa());
double FastLog(double x, Isa isa = BestIsa());

// Allocator of 64-byte aligned storage (a cache line; one AVX-512 vector).
// It takes a plain block 64 bytes larger and aligns within it, keeping the
// block's address just before the aligned storage: glibc's aligned
// allocation (operator new with align_val_t, memalign) splits and scans its
// bins, and with thousands of series each allocating its buffers it was a
// sixth of a replay's time with bocpd (perf, 1 M readings over 10,000 series).
template <class T>
struct CacheLineAllocator {
  static_assert(alignof(T) <= 64);
  using value_type = T;
  CacheLineAllocator() = default;
  template <class U>
  CacheLineAllocator(const CacheLineAllocator<U>&) {}
  T* allocate(std::size_t n) {
    if (n > (SIZE_MAX - 64) / sizeof(T)) throw std::bad_array_new_length();
    auto* block = static_cast<unsigned char*>(::operator new(n * sizeof(T) + 64));
    // At least 8 bytes past the block's start (room for its address), at
    // most 64: the block's own alignment (16) leaves 16 to 64.
    auto* aligned = reinterpret_cast<unsigned char*>(
        (reinterpret_cast<std::uintptr_t>(block) + 64) & ~std::uintptr_t{63});
    std::memcpy(aligned - sizeof block, &block, sizeof block);
    return reinterpret_cast<T*>(aligned);
  }
  void deallocate(T* p, std::size_t) {
    unsigned char* block;
    std::memcpy(&block, reinterpret_cast<unsigned char*>(p) - sizeof block, sizeof block);
    ::operator delete(block);
  }
  friend bool operator==(const CacheLineAllocator&, const CacheLineAllocator&) {
    return true;
  }
};
using AlignedDoubles = std::vector<double, CacheLineAllocator<double>>;

}  // namespace bocpd_internal

// Per-run-length constants of the recursion for a run holding n readings
// before a reading, indexed by kLanePad + R - n (descending n, after kLanePad
// entries of padding, and as many after), so that states without gaps read a
// contiguous slice. They depend only on the prior and the cap, so the series
// of one profile share one table (DetectorDesign::bocpd_tables) instead of each computing
// and holding its own (4 (R + 17) doubles: 10 KB at the default cap).
struct RunLengthTables {
  // Precondition: options.IsValid(nullptr).
  static std::shared_ptr<const RunLengthTables> Make(const BocpdOptions& options);
  // Whether these tables were made for `options`' prior and cap.
  bool Fits(const BocpdOptions& options) const;

  double kappa0 = 0, alpha0 = 0;
  int cap = 0;
  std::vector<double> step_by_age;              // 1 / (kappa_n + 1)
  std::vector<double> half_ratio_by_age;        // kappa_n / (2 (kappa_n + 1))
  std::vector<double> log_ml_next_by_age;       // L_{n+1}
  std::vector<double> minus_alpha_next_by_age;  // -alpha_{n+1}
};

// The run-length distribution P(r_t | x_1..t) and the per-run Normal-Gamma
// statistics, updated by Adams and MacKay's recursion with the cap and pruning
// described above. States are indexed 0..size()-1 in increasing run length;
// index 0 is always r = 0. Copyable (a copy allocates, and shares the
// tables); not thread-safe.
class RunLengthPosterior {
 public:
  // Uses the prior, hazard, max_run_length and prune_tolerance of `options`,
  // and `tables` when they fit those options (else makes its own).
  // Precondition: options.IsValid(nullptr). The update loop runs on the widest
  // instruction set this processor supports (bocpd_internal::BestIsa()).
  explicit RunLengthPosterior(const BocpdOptions& options,
                              std::shared_ptr<const RunLengthTables> tables = nullptr);
  // The same on a given instruction set, for tests that compare them (one this
  // processor does not support falls back to kPortable).
  RunLengthPosterior(const BocpdOptions& options, bocpd_internal::Isa isa,
                     std::shared_ptr<const RunLengthTables> tables = nullptr);

  // Adds one reading. Precondition: x finite and |x| <= kBocpdMaxAbsReading
  // (Bocpd::Update checks it). Allocation-free.
  void Update(double x);

  // Back to P(r = 0) = 1, no readings.
  void Reset();
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

  std::int64_t readings() const { return readings_; }  // since construction or Reset
  // States held, r = 0 included.
  int size() const { return static_cast<int>(end_ - begin_); }
  int max_run_length() const { return cap_; }

  // State i, 0 <= i < size(), in increasing run length.
  int run_length(int i) const;
  double probability(int i) const;
  double mean(int i) const;      // posterior mean of the run's mean
  double variance(int i) const;  // beta / alpha: 1 / posterior mean precision

  // P(r_t = run_length); 0 for a run length not held.
  double ProbabilityOf(int run_length) const;
  // P(1 <= r_t <= w) for w >= 0 (the change probability for window w).
  double ProbabilityWithin(int w) const;
  // Index of the most probable state with r >= 1 (ties: the shorter run), or
  // -1 before the first reading.
  int MostProbableRunIndex() const;
  // Most probable run length over all states, r = 0 included (ties: shorter).
  int MapRunLength() const;
  double MapProbability() const;
  // Posterior mean of r_t, counting the cap state as R.
  double MeanRunLength() const;
  // Smallest j with P(r_t <= j) >= 1/2.
  int MedianRunLength() const;

  // log p(x_1..t) (natural log), summed over the updates since Reset; with
  // pruning it is the evidence of the pruned mixture.
  double log_evidence() const { return log_evidence_; }
  // log p(x_t | x_1..t-1) of the latest reading (0 before the first).
  double last_log_predictive() const { return last_log_predictive_; }

 private:
  std::size_t Slot(int i) const { return end_ - 1 - static_cast<std::size_t>(i); }
  void SlideCapState(std::size_t slot, double log_joint);
  void Prune();
  void AppendFreshState();

  // Options used by the recursion, and logs of a few of them.
  double mu0_, kappa0_, alpha0_, beta0_;
  double prior_log_mass_;  // alpha0 log beta0
  double log_hazard_;      // log H
  double log_growth_;      // log(1 - H)
  double hazard_, tolerance_;
  int cap_;                  // R
  bocpd_internal::Isa isa_;  // instruction set of the update loop

  std::shared_ptr<const RunLengthTables> tables_;  // shared, never null

  // States, oldest (longest run) first, in slots [begin_, end_) of buffers
  // holding 2 (R + 1) + 1 slots; the block slides right as states are merged
  // away at the cap and appended at r = 0, and moves back to slot 0 when it
  // reaches the end (every R updates or so). Slot buffers are 64-byte
  // aligned (the update loop aligns its vectors on slots).
  bocpd_internal::AlignedDoubles mu_, beta_;
  bocpd_internal::AlignedDoubles log_mass_;  // g_j
  bocpd_internal::AlignedDoubles weight_;    // w_j
  std::vector<std::int64_t> birth_;          // readings_ when the state was r = 0
  std::size_t slots_ = 0;                    // 2 (R + 1) + 1
  std::size_t begin_ = 0, end_ = 0;
  // Most probable state with r >= 1 (valid when readings_ > 0).
  std::size_t map_slot_ = 0;
  double scale_ = 1.0;      // P_t(j) = w_j scale_
  double log_shift_ = 0.0;  // s_t

  // Scratch for one update, indexed by lane (slot - lane0 of Update): the
  // per-run-length constants gathered when pruning has left gaps. (The u_j
  // of an update live in weight_ until they are weighed.)
  bocpd_internal::AlignedDoubles gather_step_, gather_half_ratio_, gather_log_ml_next_,
      gather_minus_alpha_next_;

  // The last R + 1 readings (ring), for the sliding cap state; reading t at
  // index t mod (R + 1), the latest at recent_at_.
  std::vector<double> recent_;
  std::size_t recent_at_ = 0;

  std::int64_t readings_ = 0;
  double log_evidence_ = 0.0;
  double last_log_predictive_ = 0.0;
};

// What the posterior says about the latest change (see "Estimates").
struct ChangeEstimate {
  int run_length = 0;        // s; 0 when no state 1..w is held (then the rest is unset)
  double probability = 0.0;  // P_t(s)
  EventTime change_at = 0;   // time of the first reading of run s
  double mean_before = 0.0;  // posterior mean of the regime before the change
  double mean_after = 0.0;   // posterior mean of run s
  double variance_before = 0.0;  // beta / alpha before
  double variance_after = 0.0;   // beta / alpha of run s
  double shift = 0.0;            // mean_after - mean_before
  Direction direction = Direction::kNone;
};

// A compact view for status pages and the HTTP API.
struct RunLengthSummary {
  std::int64_t readings = 0;  // since construction or Reset
  int live_hypotheses = 0;    // states held, r = 0 included
  int map_run_length = 0;
  double map_probability = 0.0;
  double mean_run_length = 0.0;
  int median_run_length = 0;
  double change_probability = 0.0;  // C_t
  double cap_probability = 0.0;     // P(r_t = R): runs of at least R readings
  bool armed = false;               // readings >= min_readings
};

class Bocpd {
 public:
  // Checks the options; returns InvalidArgument naming the bad option otherwise.
  static StatusOr<Bocpd> Create(const BocpdOptions& options);

  // Precondition: options.IsValid(nullptr). Prefer Create for options that come
  // from users or config.
  // `tables`: RunLengthTables::Make(options), shared by the series of a
  // profile; made here when null or made for other options.
  explicit Bocpd(const BocpdOptions& options,
                 std::shared_ptr<const RunLengthTables> tables = nullptr);

  // Adds one standardised reading taken at `time`. Returns the alarm: fired
  // only at the reading where C_t crosses the threshold (see "Alarm rule");
  // statistic = C_t; change_at, direction and shift filled from
  // EstimateChange() while the detector is armed and C_t > threshold. Fails
  // with InvalidArgument, leaving all state untouched, when x is NaN, infinite
  // or |x| > kBocpdMaxAbsReading. Allocation-free on success.
  StatusOr<Alarm> Update(double x, EventTime time);

  // Back to the prior: P(r = 0) = 1, counters cleared, disarmed.
  void Reset();
  // Checkpoints (detectors/snapshot.h): Load expects an object built from the
  // same options and overwrites its state; Corruption on a mismatch.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

  double change_probability() const { return change_probability_; }  // C_t
  int map_run_length() const { return posterior_.MapRunLength(); }
  int live_hypotheses() const { return posterior_.size(); }
  bool armed() const { return posterior_.readings() >= options_.min_readings; }
  std::int64_t readings_since_restart() const { return posterior_.readings(); }
  std::int64_t alarms() const { return alarms_; }  // alarms since construction or Reset

  RunLengthSummary Summary() const;
  ChangeEstimate EstimateChange() const;
  const RunLengthPosterior& posterior() const { return posterior_; }

  const BocpdOptions& options() const { return options_; }
  double arl0() const { return options_.arl0; }  // 0 = not calibrated

 private:
  struct Snapshot {
    double mean = 0.0;
    double variance = 0.0;
  };

  BocpdOptions options_;
  RunLengthPosterior posterior_;
  // Ring of the last w reading times and of the last w + 1 snapshots of the
  // most probable run, indexed by reading number modulo their size; the
  // latest at time_at_ and snapshot_at_.
  std::vector<EventTime> times_;
  std::vector<Snapshot> snapshots_;
  std::size_t time_at_ = 0, snapshot_at_ = 0;
  double change_probability_ = 0.0;
  bool above_ = false;  // armed and C_t > threshold at the previous reading
  std::int64_t alarms_ = 0;
};

}  // namespace plumbline
