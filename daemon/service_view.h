// ServiceView: what the HTTP API and the metrics page may ask of a running
// `serve` daemon, without knowing about shards, queues or threads. The service
// (serve_command.cc) implements it; the HTTP server (http_server.h) calls it.
// Thread-safe: every method may be called from any I/O thread; an
// implementation answers questions about a series by posting to the shard that
// owns it and waiting (bounded) for the answer, never by reading shard state
// from another thread.
#pragma once

#include <cstddef>
#include <limits>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/engine.h"
#include "detectors/annotation.h"
#include "detectors/event_time.h"
#include "detectors/prediction.h"
#include "detectors/status.h"

namespace plumbline {

// The answer to `POST /v1/readings`: how many lines were taken and why others
// were not (the first few, with their 1-based line numbers in the body).
struct IngestReceipt {
  struct Rejection {
    std::size_t line = 0;
    std::string reason;
  };
  std::size_t accepted = 0;
  std::size_t rejected = 0;
  std::vector<Rejection> first_rejections;  // at most kMaxReportedRejections
  // The ingest memory budget was full: nothing was taken (HTTP 503), send
  // the whole body again later.
  bool overloaded = false;
  static constexpr std::size_t kMaxReportedRejections = 10;
};

// What a series is doing, in one word, as the API and the status page name it
// (first that applies):
//   quiet     silent: no reading for longer than its silence span
//   held      its last reading fell in a maintenance window
//   settling  still learning (before warmup)
//   shifted   a level, variance or rate alert came and the model is still
//             learning the new regime (its retrain event has not come yet)
//   steady    none of the above
enum class SeriesState { kSettling, kSteady, kShifted, kQuiet, kHeld };
std::string_view ToString(SeriesState state);
std::optional<SeriesState> SeriesStateFromString(std::string_view text);

// One row of `GET /v1/series`.
struct SeriesSummary {
  std::string name;
  std::string kind;                 // gauge | count | meter
  EventTime last_time = 0;          // event time of the last reading
  double last_value = 0.0;
  long long readings = 0;
  bool armed = false;               // past warmup
  bool silent = false;
  SeriesState state = SeriesState::kSettling;
  long long alert_count = 0;                // alerts raised since the daemon started
  std::optional<EventTime> last_change_at;  // change_at of the latest alert
};

// `GET /v1/series/{name}`: the summary plus what the model and detectors think.
struct SeriesDetail {
  SeriesSummary summary;
  double forecast = 0.0;            // at the last reading's time
  double band_low = 0.0;            // forecast -/+ band (about 95%)
  double band_high = 0.0;
  double sigma = 0.0;               // residual scale, in the series' units
  double last_z = 0.0;
  struct DetectorState {
    std::string name;               // cusum | page-hinkley | bocpd | ewma | variance | rate
    double statistic = 0.0;         // current value of its statistic
    double threshold = 0.0;         // its decision interval
  };
  std::vector<DetectorState> detectors;
  struct RunLength {                // BOCPD's view, when it runs on this series
    double most_likely = 0.0;       // MAP run length, in observations
    double change_probability = 0.0;
  };
  std::optional<RunLength> run_length;
  // How the residuals behave against what the thresholds assume
  // (detectors/calibration_health.h); NaN until the series is armed.
  struct Calibration {
    double autocorrelation = std::numeric_limits<double>::quiet_NaN();  // lag one, whitener's
    double variance = std::numeric_limits<double>::quiet_NaN();
    double lag1 = std::numeric_limits<double>::quiet_NaN();
    double tail_share = std::numeric_limits<double>::quiet_NaN();
    double drift_ratio = std::numeric_limits<double>::quiet_NaN();
    std::string level_chart = "normal";  // normal | count (the count CUSUM)
    double adapted_threshold = 0.0;      // the CUSUM's re-fitted h; 0 = designed
  };
  Calibration calibration;
  struct Point {
    EventTime time = 0;
    double value = 0.0;
    // The one-step-ahead forecast and its band; NaN (JSON null) where the
    // series has none (series_trace.h).
    double forecast = std::numeric_limits<double>::quiet_NaN();
    double band_low = std::numeric_limits<double>::quiet_NaN();
    double band_high = std::numeric_limits<double>::quiet_NaN();
  };
  std::vector<Point> recent_points;  // oldest first, bounded (`recent_points`)
  // Config annotations that apply to this series: a planned change spans
  // [at - within, at + within], a maintenance window [from, to).
  struct Span {
    std::string id;
    std::string kind;  // planned-change | maintenance
    EventTime from = 0;
    EventTime to = 0;
    std::string note;
  };
  std::vector<Span> annotations;
  std::vector<Alert> recent_alerts;  // oldest first, bounded
};

// `GET /v1/series/{name}/forecast`: the model's readings at the times asked,
// and when its next reading should come (detectors/prediction.h).
struct SeriesForecast {
  std::string name;
  std::vector<ReadingForecast> readings;    // one per time asked, in order
  std::optional<NextReadingForecast> next;  // absent while the arrival model cannot say
  std::string next_unknown;                 // then: why
};

// One row of `GET /v1/annotations`.
struct AnnotationEntry {
  Annotation annotation;
  bool from_config = false;  // declared in the config file (not deletable by the API)
};

class ServiceView {
 public:
  virtual ~ServiceView() = default;
  // Parses `body` (CSV and/or JSON lines, DESIGN.md) and hands the readings to
  // the shards; blocks while their queues are full (backpressure).
  virtual IngestReceipt IngestLines(std::string_view body) = 0;
  // Series whose names match `glob` ("" or "**" for all), sorted by name.
  virtual std::vector<SeriesSummary> ListSeries(std::string_view glob) = 0;
  virtual std::optional<SeriesDetail> GetSeries(std::string_view name) = 0;
  // Alerts and events with detected_at >= since, oldest first, bounded.
  virtual std::vector<Alert> AlertsSince(EventTime since) = 0;
  // Ready once config is loaded and state restored, and while every durable
  // sink works; otherwise false with the reason in *why.
  virtual bool Ready(std::string* why) = 0;

  // Forecasts of one series at `at` (each no earlier than its model's last
  // observation) with intervals of `level`. NotFound for an unknown series;
  // else ForecastReading's failures. The defaults answer Unavailable: a view
  // without series models.
  virtual StatusOr<SeriesForecast> ForecastSeries(std::string_view /*name*/,
                                                  const std::vector<EventTime>& /*at*/,
                                                  double /*level*/) {
    return Status::Unavailable("this server keeps no series models");
  }
  // The annotations in force: the config file's, then those made through the API.
  virtual std::vector<AnnotationEntry> ListAnnotations() { return {}; }
  // Adds one annotation given as a JSON object (the config's annotation keys),
  // applies it to every series it matches (new and existing) and keeps it
  // across restarts. InvalidArgument for a bad body (with every problem),
  // FailedPrecondition when its id is taken, IoError when it could not be
  // saved (nothing changed then), Unavailable when not running.
  virtual StatusOr<Annotation> CreateAnnotation(std::string_view /*body*/) {
    return Status::Unavailable("this server keeps no annotations");
  }
  // Removes an annotation made through the API. NotFound for an unknown id;
  // FailedPrecondition for one declared in the config file (with the reason);
  // IoError when the change could not be saved (nothing changed then).
  virtual Status DeleteAnnotation(std::string_view /*id*/) {
    return Status::Unavailable("this server keeps no annotations");
  }
};

}  // namespace plumbline
