// SeriesMonitor: the per-series pipeline. Turns one series' raw readings into
// alerts: reorder late readings, turn readings into observations by the series'
// kind, forecast, standardise the residual, run the change detectors, decide,
// re-baseline. Also watches arrivals (rate changes) and silence. Not
// thread-safe; owned by one shard, which feeds it readings in arrival order.
//
//   reading (t, v) -> reorder within `lateness` -> arrival model (rate alerts)
//     -> intake (detectors/intake.h): by kind, `every` bucketing and gap policy,
//        readings become observations, each a mean over an interval or an instant
//     -> forecaster: one-step-ahead forecast yhat and variance factor v
//     -> u = (y - yhat) / sqrt(1 + v)
//     -> phase profile (detectors/residual_profile.h): v = u - m(phase), the
//        residual mean the smooth seasonal terms miss at this phase of the
//        shortest season
//     -> whitening (detectors/residual_whitener.h): a = the innovation of an
//        Ornstein-Uhlenbeck process plus white noise, fitted online from the
//        residuals' correlations at one and two mean gaps (a plain AR(1) in
//        continuous time when that fits); sigma = the phase's
//        spread (ResidualProfile, shrunk toward ResidualScale on a); z = a / sigma
//     -> after `warmup` observations: level detectors (profile's list, calibrated
//        by DesignDetectors) on z winsorised at +/- kLevelClip, so one spike can
//        add at most that much (Huber-type, common practice, no source), and the
//        variance CUSUM on z (it caps z^2 itself)
//     -> decision: `agree` level detectors within `agree_within` observations
//        raise a level alert; change_at from the most trusted firing detector
//        (CUSUM, then Page-Hinkley, BOCPD, EWMA); then re-baseline (the level
//        moves by the estimated shift with its variance opened up so the model
//        settles fast), detectors restart, and a cooldown of `cooldown`
//        observations holds further level and spread alerts (default: the
//        smaller of warmup and kSettlingDimensions times the forecaster's
//        coefficients, enough for the re-baselined model to settle; see
//        DefaultCooldown). A spread alert holds the spread chart for
//        `cooldown` or else warmup, the level detectors for 20 observations
//        while the scale re-learns.
//     -> `retrain` event once the new regime holds `warmup` observations.
//
// Empirical re-fit (a bounded threshold adjustment after warmup): the variance
// and arrival CUSUMs are designed for normal residuals and Poisson arrivals.
// Real series have heavier tails and burstier arrivals, which would make them
// fire far more often than designed. So once armed, each collects its first
// RefitSampleSize() increments (kRefitSample, or as many as span the phase
// profile's period, so that a weekday's and a Sunday's readings are both in a
// weekly series' sample; at most kMaxRefitSample); if their variance (times
// its long-run inflation)
// is within 15% of the model's, the design stands; otherwise the decision
// intervals are re-calibrated on their
// empirical distribution by the same Markov chain (run_length_chain.h), then
// grown by the sample's long-run variance inflation (neighbouring increments that
// move together, such as arrivals in bursts), never lowered and at most
// kRefitCeiling times the design (common practice, no source). Before the
// sample is full, interim re-fits on its first 125, 250 and 500 values act
// where those already reach the cap far more often than the model allows (an
// exact binomial test at 1%): they only raise the intervals, and the full
// sample then decides. On seeded Student-t (3 d.f.) streams the variance chart
// raised 125 false alarms in the three weeks after warmup of 100 streams
// without them, 44 with them (start_up_false_alarm_test); on normal residuals
// few streams fail the test, so the design stands there. The level
// detectors keep their designed thresholds (they see winsorised z), except
// where the profile opts in with adapt_thresholds: then the CUSUM's decision
// interval gets the same re-fit on its first RefitSampleSize() winsorised z after
// warmup (model variance E[min(Z^2, kLevelClip^2)]), the larger of its two
// sides' re-fits, so residuals that stay correlated or heavy-tailed after
// whitening cannot break the false-alarm promise; the count CUSUM always gets
// it (below). Each series also keeps a CalibrationHealth of the z its level
// detectors see (detectors/calibration_health.h), shown in the API and metrics.
//
// Low counts (profile key count_chart): a count series whose mean over its
// warmup is below kLowCountMean and whose residual variance does not exceed
// that mean beyond chance (the dispersion index test at 0.1%; overdispersed
// counts keep the normal CUSUM on their own spread), or any count series with
// count_chart: poisson, has the CUSUM's place taken by the count CUSUM of
// detectors/poisson_cusum.h, designed at the warmup's mean count mu for the
// change mu -> mu +/- shift sqrt(mu) (the profile's shift, in Poisson sd), each
// side by the exact chain for twice the level detectors' per-detector ARL0.
// It reads the reading itself (rounded, winsorised at
// mu_t + kLevelClip sqrt(mu_t)) against the in-control mean mu_t = the
// forecast with the phase profile's mean, as the time-varying-mean chart
// (reference values scaled by mu_t / mu). Its design then gets the same
// empirical re-fit as the variance and arrival CUSUMs, on its first
// RefitSampleSize() increments, since a seasonal mean and an estimated forecast
// make the exact chain's h only a design value. The other level detectors
// keep watching z, except where a count series expects fewer than
// kLowCountMean events at a reading (a quiet hour): there z is skewed, and
// they read instead the count's mid-p quantile residual under Poisson at the
// expected count m (PoissonMidPQuantileResidual), times sqrt(m) over the
// phase's own spread, so counts more variable than Poisson keep their width.
//
// Learning while testing: while any level detector is past kBaselineFraction of
// its threshold, the residual scale, the phase profile and the autocorrelation
// stop learning; past kLearnFraction the forecaster's steps are limited to one
// sigma. So a change being tested for is not quietly absorbed before it fires.
// Counts have a resolution floor on sigma (1/sqrt(12)); at the floor the
// narrower-spread side and BOCPD are not fed, since all-zero residuals would
// look to them like a change.
//
// Wandering level (profile key level_noise): the forecaster's level may be
// given random-walk noise, q noise variances per mean spacing (the local level
// structural model, seasonal_forecaster.h). With `auto`, forecasters with q in
// kLevelNoiseGrid run side by side until the detectors arm; each is scored by
// the Gaussian likelihood of its one-step forecasts (prediction-error
// decomposition with the noise variance concentrated out, each candidate's
// errors whitened by its own AR(1)), and a q > 0 must beat the plain forecaster
// by a likelihood-ratio test at the 5% level for a variance on the boundary
// (a 50:50 mixture of chi-square 0 and 1: 2.71; Self & Liang 1987, JASA
// 82:605-610; MEM). Scoring starts once a forecaster has seen twice as many
// observations as it has coefficients and needs kMinScores errors, so short
// warmups keep the plain forecaster. A wandering level absorbs slow shifts (a
// shift is then told apart from the wandering only by its size), which is why
// it is not the default: series such as monthly sales or traffic whose level
// moves in small lasting steps all the time want it; sensors with a stationary
// but autocorrelated noise do not (the AR(1) whitening below handles them).
//
// Annotations (detectors/annotation.h): at a planned change the series
// re-baselines from its time T: the forecaster's coefficients are opened up
// (kReopenVariance) so level and seasonal shape re-learn, the phase profile
// starts afresh, the level and variance detectors restart and wait
// max(warmup, 2 x coefficients) observations, and a retrain event follows with
// change_at = T. Any level, variance or rate alert whose change_at lies within
// `within` of T (in the expected direction, if one is given) is marked as
// explained by it. An alert of any kind detected inside a maintenance window is
// turned into a kSuppressed event naming the window (kept, not sent as an
// alert); with learn: false the window's readings do not reach the model.
//
// False-alarm budget: the profile's arl0 is shared so that all alert kinds
// together keep it (union bound): level detectors get 1/2 of the rate
// (ARL0 x 2), the variance CUSUM 1/4 (x 4), the arrival CUSUMs 1/4 (x 4, in gaps).
// Silence is separate: `silence_after`, or else an adaptive
// max(5, ln(4 arl0)) mean gaps of operational time (slow hours of a seasonal
// stream count for less), which for Poisson arrivals is a false-silence chance of
// about 1/(4 arl0) per gap.
#pragma once

#include <algorithm>
#include <array>
#include <cstdint>
#include <memory>
#include <optional>
#include <string>
#include <type_traits>
#include <utility>
#include <variant>
#include <vector>

#include "detectors/annotation.h"
#include "detectors/arrival_model.h"
#include "detectors/bocpd.h"
#include "detectors/calibration.h"
#include "detectors/calibration_health.h"
#include "detectors/covariate.h"
#include "detectors/cusum.h"
#include "detectors/detection.h"
#include "detectors/ewma.h"
#include "detectors/intake.h"
#include "detectors/page_hinkley.h"
#include "detectors/poisson_cusum.h"
#include "detectors/profile.h"
#include "detectors/quantised_sample.h"
#include "detectors/residual_profile.h"
#include "detectors/residual_scale.h"
#include "detectors/residual_whitener.h"
#include "detectors/seasonal_forecaster.h"
#include "detectors/status.h"
#include "detectors/variance_cusum.h"

namespace plumbline {

enum class AlertKind { kLevel, kVariance, kRate, kSilence };
std::string_view ToString(AlertKind kind);
std::optional<AlertKind> AlertKindFromString(std::string_view text);

enum class EventType {
  kAlert,       // the series left its regime (or went silent)
  kResume,      // a silent series sent a reading again
  kRetrain,     // the new regime has `warmup` observations: retrain on [from, to]
  kMeterReset,  // a meter total went down: reset or replacement, re-based, no alert
  kSuppressed,  // an alert held back by a maintenance window (kept, not sent as an alert)
};
std::string_view ToString(EventType type);

struct SeriesEvent {
  EventType type = EventType::kAlert;
  AlertKind kind = AlertKind::kLevel;
  Direction direction = Direction::kNone;
  EventTime detected_at =
      0;  // time of the reading at which it fired (silence: when it began)
  EventTime change_at = 0;      // estimated start of the change (retrain: window start)
  EventTime window_to = 0;      // retrain: window end
  std::uint32_t detectors = 0;  // bit (1 << DetectorKind) per level detector that fired
  double magnitude = 0.0;  // level: shift in units; variance: sd ratio; rate: gap ratio
  double magnitude_sd = 0.0;  // level: shift in residual standard deviations
  double before = 0.0;        // level: forecast at detection; rate: mean gap (s) before
  double after = 0.0;         // level: before + magnitude; rate: mean gap (s) after
  // The annotation that explains this alert (a planned change near change_at)
  // or, for kSuppressed, the maintenance window that held it back; else empty.
  std::string annotation;
};

// Everything derived from a profile once and shared by all its series:
// calibrated detector options and model settings.
struct ProfileDesign {
  ProfileOptions profile;
  DetectorDesign level;
  VarianceCusumOptions variance;
  ArrivalModelOptions arrival;
  SeasonalForecasterOptions forecaster;  // memory unset in the profile: see Make
  ResidualScaleOptions scale;

  // Calibrates everything for the profile (takes up to a fraction of a second).
  static StatusOr<ProfileDesign> Make(const ProfileOptions& profile);
};

// Why a reading did not reach the model.
enum class ReadingVerdict { kAccepted, kLate, kNotFinite };

class SeriesMonitor;

// Told of each observation a monitor has modelled, after the model, scale and
// detectors took it (replay --trace). For a bucketed series an observation is
// a bucket (from, to: its span; value: its total or mean); for a meter, the
// consumption rate over an interval; for a plain reading, from == to. Not
// owned by the monitor.
class ObservationListener {
 public:
  virtual ~ObservationListener() = default;
  virtual void Observed(const SeriesMonitor& monitor, EventTime from, EventTime to,
                        double value) = 0;
};

class SeriesMonitor {
 public:
  // `design` must outlive the monitor.
  explicit SeriesMonitor(const ProfileDesign* design);

  // The planned changes and maintenance windows that apply to this series (see
  // "Annotations" above); replaces any given before. Invalid ones are ignored.
  void SetAnnotations(std::vector<Annotation> annotations);

  // Where this series reads the profile's covariates from (null: none yet;
  // they then stand at their running means), and where it publishes its own
  // observations, as `name`, for series that use it as a covariate (null: it
  // does not). detectors/covariate.h. Both must outlive the monitor.
  void ConnectCovariates(const CovariateSource* source, CovariateSink* sink,
                         std::string name);

  // Feeds one reading; events (if any) are appended to *events.
  ReadingVerdict Observe(EventTime t, double value, std::vector<SeriesEvent>* events);
  // Releases readings held for reordering (end of input).
  void Flush(std::vector<SeriesEvent>* events);
  // Silence check against a clock (event-time in replay, wall clock in serve).
  void AdvanceClock(EventTime now, std::vector<SeriesEvent>* events);
  // When AdvanceClock would next report silence; nullopt when it cannot yet.
  std::optional<EventTime> silence_deadline() const;
  // Starts loading the state a reading at `t` touches into the caches, so a
  // caller that knows the next readings can overlap their memory waits (a
  // hint only: it changes nothing).
  void Prefetch(EventTime t) const;
  // Swaps in `design` (which must outlive the monitor) for a new false-alarm
  // budget or decision rule (arl0, shift, detectors, agree, agree_within,
  // cooldown, warmup, silence_after) while keeping what the series taught the
  // model: forecaster, residual scale and phase profile, whitening, arrival
  // shape, reorder buffer, silence state. The level detectors and the
  // variance CUSUM start afresh from the new design, and the variance and
  // arrival decision intervals return to its calibrated values and are
  // re-fitted on the next readings, as after warmup. Precondition: the model
  // settings (kind, seasons, harmonics, gaps, every, memory, trend,
  // level_noise, lateness) equal the current design's.
  void Retune(const ProfileDesign* design);

  // Checkpoints (detectors/snapshot.h). Save writes everything the monitor
  // has learned and holds (model, detectors, reorder buffer, intake, silence
  // and regime bookkeeping), so that a monitor restored by Load on the same
  // design continues exactly as the saved one would have. Load expects a
  // fresh monitor on a design with the same profile settings (the caller
  // checks them) and returns Corruption when the state does not fit it; call
  // SetAnnotations after it.
  void Save(SnapshotWriter& w) const;
  Status Load(SnapshotReader& r);

  // Read-only views for APIs and tests.
  // Null until the first kProbe observations have set the forecaster's memory.
  const SeasonalForecaster* forecaster() const {
    return forecaster_ ? &*forecaster_ : nullptr;
  }
  const ResidualScale& scale() const { return scale_; }
  // The phase profile; null until the forecaster starts (forecasts, prediction.h).
  const ResidualProfile* residual_profile() const { return profile_ ? &*profile_ : nullptr; }
  // The residual spread at a phase bin of the profile (which must exist): the
  // profile's, floored at the series' resolution.
  double PhaseSigma(int bin) const;
  // The same for an observation over [from, to] (PhaseBin, as the model
  // takes it); 0 before the profile exists.
  double PhaseSigmaOver(EventTime from, EventTime to) const;
  const ProfileOptions& profile() const { return design_->profile; }
  const ArrivalModel& arrivals() const { return arrival_; }
  const VarianceCusum& variance_chart() const { return variance_; }
  long long observations() const { return observations_; }
  // Whether the level and spread detectors watch the series now: past warmup,
  // and the model has known its coefficients better than one reading's noise
  // since it started or a planned change reopened it (see Model).
  bool armed() const { return observations_ > design_->profile.warmup && settled_; }
  bool silent() const { return silent_; }
  double last_z() const { return last_z_; }
  // Null: none (the default). Not saved with the state.
  void SetObservationListener(ObservationListener* listener) { listener_ = listener; }
  // Whether the count CUSUM (detectors/poisson_cusum.h) plays the CUSUM's part.
  bool count_chart() const;
  // How the armed residuals behave against the detectors' assumptions.
  const CalibrationHealth& health() const { return health_; }
  // The CUSUM's decision interval re-fitted by adapt_thresholds; 0 until then.
  double adapted_threshold() const { return std::max(adapted_h_, 0.0); }
  // Estimated lag-one autocorrelation of the residuals at the mean spacing.
  double residual_autocorrelation() const { return whitener_.lag1(); }
  const ResidualWhitener& whitener() const { return whitener_; }

  // What one detector shows now (for the HTTP API and metrics). A two-sided
  // detector reports the side nearer its decision interval.
  struct DetectorSnapshot {
    std::string_view name;   // cusum | page-hinkley | bocpd | ewma | variance | rate
    double statistic = 0.0;  // cusum, page-hinkley, variance, rate: the CUSUM sum;
                             // bocpd: P(change within its window); ewma: |z|
    double threshold = 0.0;  // the value at which it fires
  };
  // The level detectors in profile order, then the variance and rate CUSUM pairs.
  std::vector<DetectorSnapshot> DetectorSnapshots() const;
  // BOCPD's run-length view, when the profile runs BOCPD.
  struct RunLengthSnapshot {
    int most_likely = 0;  // MAP run length, in observations
    double change_probability = 0.0;
  };
  std::optional<RunLengthSnapshot> RunLength() const;

 private:
  // BOCPD's state (672 bytes, its tables on the heap besides) is several times
  // the other detectors' (at most 192): held on the heap, so every level
  // detector slot of the many series without BOCPD stays small. Copies copy it.
  class BoxedBocpd {
   public:
    explicit BoxedBocpd(Bocpd bocpd) : bocpd_(std::make_unique<Bocpd>(std::move(bocpd))) {}
    BoxedBocpd(const BoxedBocpd& other) : BoxedBocpd(*other.bocpd_) {}
    BoxedBocpd(BoxedBocpd&&) = default;
    BoxedBocpd& operator=(const BoxedBocpd& other) {
      *bocpd_ = *other.bocpd_;
      return *this;
    }
    BoxedBocpd& operator=(BoxedBocpd&&) = default;
    Bocpd& operator*() const { return *bocpd_; }

   private:
    std::unique_ptr<Bocpd> bocpd_;  // null only when moved from
  };
  using LevelDetector = std::variant<Cusum, PageHinkley, BoxedBocpd, Ewma, PoissonCusum>;
  // std::visit on a level detector, BOCPD unboxed.
  template <typename Visitor>
  static decltype(auto) VisitLevel(Visitor&& visitor, LevelDetector& detector) {
    return std::visit(
        [&visitor](auto& d) -> decltype(auto) {
          if constexpr (std::is_same_v<std::decay_t<decltype(d)>, BoxedBocpd>) {
            return visitor(*d);
          } else {
            return visitor(d);
          }
        },
        detector);
  }
  template <typename Visitor>
  static decltype(auto) VisitLevel(Visitor&& visitor, const LevelDetector& detector) {
    return std::visit(
        [&visitor](const auto& d) -> decltype(auto) {
          if constexpr (std::is_same_v<std::decay_t<decltype(d)>, BoxedBocpd>) {
            return visitor(std::as_const(*d));
          } else {
            return visitor(d);
          }
        },
        detector);
  }
  struct Firing {
    long long observation = -1;  // index at which it fired; -1 none
    Alarm alarm;
  };

  void Process(EventTime t, double value, std::vector<SeriesEvent>* events);
  void Model(EventTime from, EventTime to, double y, std::vector<SeriesEvent>* events);
  // y: the reading; expected: its forecast with the phase profile's mean
  // (what the count CUSUM takes as the in-control mean); bocpd_sees: whether
  // BOCPD takes this reading (Model says when it does not).
  void DecideLevel(EventTime t, double y, double expected, double forecast,
                   double sigma, bool bocpd_sees, std::vector<SeriesEvent>* events);
  // At arming: the count CUSUM in the CUSUM's place when the profile's
  // count_chart asks for it (detectors/profile.h), designed at the mean count.
  void ChooseCountChart();
  // Feeds the count CUSUM's re-fit sample; re-fits once it is full.
  void CollectCountIncrements(double count, double down_ratio, PoissonCusum& chart);
  // Readings from an alarm's change_at through the current one: the firing
  // detector's count (Alarm::length) plus those since it fired, at
  // observation fired_at.
  long long ReadingsSince(const Alarm& alarm, long long fired_at) const;
  // The change point and step of a CUSUM's or Page-Hinkley's firing, estimated
  // again with the step's size unknown (series_monitor.cc).
  Alarm ReestimateChange(const Alarm& alarm) const;
  // The level detectors' last kChangeWindow inputs (winsorised z) and their
  // times, oldest first from recent_count_ % kChangeWindow.
  static constexpr int kChangeWindow = 16;
  std::array<double, kChangeWindow> recent_z_{};
  std::array<EventTime, kChangeWindow> recent_times_{};
  std::uint64_t recent_count_ = 0;  // inputs since the series started
  void StartRegime(EventTime change_at, long long readings);
  // Annotations.
  void ApplyPlannedChange(const Annotation& change);
  void Annotate(std::vector<SeriesEvent>* events, std::size_t first) const;
  bool Unlearned(
      EventTime t) const;  // in a maintenance window that does not teach the model
  std::vector<Annotation> planned_;  // by `at`
  std::vector<Annotation> maintenance_;
  std::size_t next_planned_ = 0;
  // Coefficient variance added at a planned change (in noise variances): the
  // seasonal shape and level re-learn within about `dimension` observations.
  static constexpr double kReopenVariance = 100.0;
  void ResetLevelDetectors();
  // level_ and level_kinds_ anew from a design, in its detectors' order.
  void BuildLevelDetectors(const DetectorDesign& d);
  // A phase's spread from the profile, floored at the series' resolution.
  double Floored(double phase_sigma) const;
  // The profile's bin for an observation over [from, to]: its midpoint's.
  int PhaseBin(EventTime from, EventTime to) const;
  // True while any level detector is past the given fraction of its threshold:
  // baselines then hold still rather than learn the change being tested for.
  bool Suspicious(double fraction_of_threshold) const;
  // Readings a re-baselined or reopened model takes to settle: kSettlingDimensions
  // times the forecaster's coefficients (0 before it starts). A planned change
  // waits at least this long, a level alert at most (DefaultCooldown).
  long long SettlingReadings() const;
  static constexpr long long kSettlingDimensions = 2;
  // Cooldown after a level alert when the profile sets none: the smaller of
  // warmup and SettlingReadings(). Until
  // 5 December it was warmup itself, 14 days on the demo's compressor, in
  // which a false alert blinded the series' level detectors to the door seal
  // failing three days later (2 of 48 draws, harbourside_seeds.py), and hid
  // the false alerts that a watching detector raises in that time. The
  // re-baselined level is learned within a few readings (its variance is
  // opened), the other coefficients are unchanged; twice their number is the
  // wait a planned change gets at least (common practice, no source).
  long long DefaultCooldown() const;
  // The spread chart's, the level CUSUM's and the count CUSUM's re-fit samples
  // collect only outside the warmup after an alert or a planned change (the
  // arrivals' sample is not theirs to hold): the readings that
  // follow a change, read by a model still settling on it, are not the
  // in-control series the thresholds are fitted to. With the shorter cooldown
  // and no such hold, a demo draw's spread chart was re-fitted on the hours
  // after the seal's alert and its upper interval rose from 40 to 122, so the
  // compressor's wear went unseen.
  bool RefitOpen() const { return observations_ >= refit_hold_until_; }
  // The residual scale and autocorrelation stop learning past a quarter of the
  // way; the forecaster's steps are limited to 1 sigma past half way.
  static constexpr double kBaselineFraction = 0.25;
  static constexpr double kLearnFraction = 0.5;
  static constexpr double kLevelClip = 4.0;
  // A level alert's step in the readings is the detector's shift over the
  // whitener's mean step response over the readings since change_at, at most
  // this many: it has long settled by then (persistence <= kMaxPhi).
  static constexpr long long kStepResponseReadings = 256;
  // The count CUSUM's upper side reads a forecast below this fraction of its
  // design mean as this fraction (a forecast near zero would make any count a rise).
  static constexpr double kCountMeanFloor = 0.05;
  // A re-fit sample holds at least kRefitSample readings and spans the phase
  // profile's period (a week of 5-minute readings: 2016), so that every
  // phase of the longest season is in it, up to kMaxRefitSample.
  static constexpr size_t kRefitSample = 1000;
  static constexpr size_t kMaxRefitSample = 4000;
  size_t RefitSampleSize() const;
  // Whether a sample of this size is due a re-fit: interim ones on its first
  // kRefitSample / 8, / 4 and / 2 values, made only where those already reach
  // the cap more often than the chart's model allows (ReachesCapTooOften in the
  // .cc) and only ever raising a decision interval, so that a chart does not
  // run on its design for a whole sample's length on residuals whose tails
  // plainly do not fit it; then the full one at RefitSampleSize().
  bool RefitDue(size_t sample_size) const;
  // A CUSUM pair's model of its capped score, for StagedRefit.
  struct PairModel {
    double variance;          // of the capped score in control
    double tail_probability;  // of reaching the cap in control
    double cap;
    double k_upper, k_lower;  // reference values
    double upper_h, lower_h;  // designed decision intervals
  };
  // The pair's new decision intervals from a sample due a re-fit (RefitDue),
  // if one is made; upper_h and lower_h are the intervals in force.
  std::optional<std::pair<double, double>> StagedRefit(const QuantisedSample& sample,
                                                       const PairModel& model,
                                                       double upper_h, double lower_h,
                                                       double side_arl0) const;
  static constexpr double kRefitCeiling = 3.0;
  void StartForecaster();
  // Covariates: the values as of t into covariate_values_, then into the forecasters.
  void JoinCovariates(EventTime t);
  void SetCovariates(const double* values);
  static constexpr long long kCovariateWindow = 1000;
  const CovariateSource* covariate_source_ = nullptr;
  CovariateSink* covariate_sink_ = nullptr;
  std::string name_;
  std::vector<double> covariate_values_, covariate_means_;
  std::vector<long long> covariate_counts_;
  void CollectForRefit(double variance_q, double arrival_score);

  const ProfileDesign* design_;
  // The first kProbe observations are held until their spacing is known: it
  // sets the phase bins and, unless the profile sets `memory`, memory = max(4 x
  // longest season, 100 x mean spacing), so annual data and minute data both
  // get a sensible horizon.
  static constexpr int kProbe = 8;
  // Residuals the scale must have seen before the detectors arm.
  static constexpr int kMinScaleResiduals = 10;
  static constexpr int kMaxPhaseBins = 48;
  static constexpr int kMaxLongPhaseBins =
      168;  // a week of hours; the longer profile's bins are widened to fit
  std::optional<SeasonalForecaster> forecaster_;
  // Level-noise selection (see the header comment): until the detectors arm,
  // forecasters that differ only in level_noise run beside forecaster_, each
  // scored by the likelihood of its one-step forecasts; the best one leads
  // (is forecaster_), and once armed the others are dropped.
  struct ForecastScore {
    double scaled_squares = 0.0;  // sum of whitened e^2 / (1 + f)
    double log_spreads = 0.0;     // sum of ln(1 + f)
    long long count = 0;
    double previous = 0.0, cross = 0.0, square = 0.0;  // the AR(1) whitening's sums
    static constexpr double kMaxPhi = 0.99;
    void Add(double error, double variance_factor);
    // -2 ln L, sigma^2 concentrated out, plus kLevelNoisePenalty with level noise.
    double Criterion(bool extra_parameter) const;
  };
  struct RivalForecaster {
    SeasonalForecaster forecaster;
    ForecastScore score;
  };
  static constexpr double kLevelNoisePenalty = 2.71;
  static constexpr std::array<double, 6> kLevelNoiseGrid = {0.0, 0.01, 0.03,
                                                            0.1, 0.3,  1.0};
  // Forecasts are scored once a forecaster has seen this many times as many
  // observations as it has coefficients (before that, its errors mostly tell
  // how far from identified it still is), and a choice needs kMinScores of them.
  static constexpr int kScoreAfterDimensions = 2;
  static constexpr long long kMinScores = 10;
  ForecastScore forecaster_score_;
  std::vector<RivalForecaster> rivals_;
  void ScoreRivals(EventTime from, EventTime to, double y);
  struct HeldObservation {
    EventTime from, to;
    double y;
    std::vector<double> covariates;
  };
  std::vector<HeldObservation> probe_;
  ResidualScale scale_;
  std::optional<ResidualProfile> profile_;  // made with the forecaster
  ArrivalModel arrival_;
  VarianceCusum variance_;
  std::vector<LevelDetector> level_;
  std::vector<DetectorKind> level_kinds_;
  std::vector<Firing> firings_;

  // Reordering: readings held until they are `lateness` behind the newest.
  std::vector<std::pair<EventTime, double>> pending_;
  EventTime newest_ = INT64_MIN;
  EventTime released_ = INT64_MIN;

  Intake intake_;
  std::vector<Observation> observations_scratch_;
  std::vector<MeterReset> resets_scratch_;

  long long observations_ = 0;
  long long level_hold_until_ = 0;  // observation index before which level alerts wait
  long long variance_hold_until_ = 0;
  // Observation index before which the re-fit samples collect nothing: the
  // warmup after an alert or a planned change (RefitOpen).
  long long refit_hold_until_ = 0;
  long long rate_hold_until_ = 0;  // in arrivals
  double last_z_ = 0.0;
  ObservationListener* listener_ = nullptr;
  double value_sum_ = 0.0;             // of the learned readings, for the mean count
  bool count_chart_decided_ = false;   // ChooseCountChart ran since the last design
  // (count, unfloored mean ratio) pairs for the re-fit (older checkpoints hold
  // the floored ratio; the difference is below kCountMeanFloor).
  std::vector<double> count_sample_;
  bool count_refitted_ = false;
  CalibrationHealth health_;
  QuantisedSample level_sample_;      // winsorised z for adapt_thresholds
  double adapted_h_ = 0.0;            // 0: the design's h
  void CollectLevelSample(double clipped_z);
  ResidualWhitener whitener_;
  std::vector<double> threshold_fraction_;  // per level detector, at its last update
  QuantisedSample variance_sample_;         // capped z^2, until re-fitted
  QuantisedSample arrival_sample_;          // arrival scores X, until re-fitted
  bool variance_refitted_ = false, arrival_refitted_ = false;
  bool silent_ = false;
  // The unsettled variance factor has been < 1 since the model started or was
  // last reopened (saved; a checkpoint from before counts as settled).
  bool settled_ = false;
  bool has_reading_ = false;
  EventTime last_reading_ = 0;

  // Regime bookkeeping for retrain events.
  std::optional<EventTime> regime_start_;
  long long regime_observations_ = 0;
};

}  // namespace plumbline
