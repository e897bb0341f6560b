// HttpApi: the routes of Plumbline's HTTP API as a pure function from a
// request (method, target, body) to a response, with no sockets, so every route
// is testable without a network. HttpServer (http_server.h) carries requests
// to it and responses back.
//
//   POST /v1/readings            body of reading lines -> accepted, rejected, first errors
//   GET  /v1/series?match=GLOB   series whose names match (all without match), sorted;
//                                &limit=N caps the rows (default 1000, at most 100000)
//   GET  /                       the status page (ui_pages.h), reading the routes below
//   GET  /v1/series/{name}       one series in detail; {name} is the rest of the path,
//                                percent-decoded ('/' is part of series names); with
//                                its recent readings, forecasts and bands
//                                (`recent_points`), recent alerts and the annotations
//                                that apply to it
//   GET  /v1/series/{name}/forecast?at=T[,T...]&level=0.95
//                                predicted reading and prediction interval at each T
//                                (default: the expected time of the next reading),
//                                and the next reading's expected time and 10/50/90%
//                                quantiles (detectors/prediction.h); 400 for a T
//                                before the model's last observation, 409 while the
//                                model has not started. A series whose name ends in
//                                "/forecast" is reached through GET /v1/series/{name}.
//   GET  /v1/alerts?since=T      alerts and events at or after T (RFC 3339 or epoch seconds)
//   GET  /v1/annotations         planned changes and maintenance windows in force,
//                                each with "source": "config" or "api"
//   POST /v1/annotations         body: one JSON object with the config's annotation keys
//                                (kind, match, at, within, direction, from, to, learn,
//                                note, id); 201 with the annotation as stored (id given
//                                when absent), 400 with every problem, 409 for a taken id
//   DELETE /v1/annotations/{id}  removes one made through the API; 404 unknown, 409
//                                for one declared in the config file (edit the file
//                                and reload)
//   GET  /healthz                200 while the process serves requests
//   GET  /readyz                 200, or 503 with the reason
//   GET  /metrics                Prometheus text exposition (ServiceMetrics); first
//                                refreshes the per-series detector gauges of the
//                                admitted series (one ServiceView::GetSeries each)
//
// GET routes answer HEAD too. An unknown path is 404; a known path with
// another method is 405 with an Allow header. Errors are JSON
// {"error": "..."} except on the plain-text routes (/healthz, /readyz).
//
// Thread-safe when its ServiceView and ServiceMetrics are (they are).
#pragma once

#include <cstddef>
#include <optional>
#include <string>
#include <string_view>

#include "daemon/annotation_store.h"
#include "daemon/metrics.h"
#include "daemon/service_view.h"
#include "daemon/text.h"

namespace plumbline {

struct ApiResponse {
  unsigned status = 200;
  std::string content_type = "application/json";
  std::string body;
  std::string allow;  // the Allow header of a 405
  // The route label for metrics: "status_page", "readings", "series",
  // "series_detail", "alerts", "healthz", "readyz", "metrics", or "other"
  // (unknown paths).
  std::string_view route = "other";
};

struct HttpApiOptions {
  std::size_t default_series_limit = 1000;  // rows of GET /v1/series without &limit
  std::size_t max_series_limit = 100000;    // largest &limit accepted
  // Rules: 1 <= default_series_limit <= max_series_limit <= 10000000.
  bool IsValid(std::string* why) const;
};

class HttpApi {
 public:
  // `view` must outlive the API; `metrics` may be null (then /metrics is 404).
  HttpApi(ServiceView& view, ServiceMetrics* metrics, HttpApiOptions options = {});

  // Answers one request. `target` is the request-target as sent (path and
  // query, percent-encoded). Never throws.
  ApiResponse Handle(std::string_view method, std::string_view target,
                     std::string_view body) const;

 private:
  ApiResponse PostReadings(std::string_view body) const;
  ApiResponse ListSeries(std::string_view query) const;
  ApiResponse GetSeries(std::string_view encoded_name) const;
  ApiResponse ListAlerts(std::string_view query) const;
  ApiResponse GetForecast(std::string_view encoded_name, std::string_view query) const;
  ApiResponse ListAnnotations() const;
  ApiResponse CreateAnnotation(std::string_view body) const;
  ApiResponse DeleteAnnotation(std::string_view encoded_id) const;
  ApiResponse Ready() const;
  ApiResponse Metrics() const;

  ServiceView& view_;
  ServiceMetrics* metrics_;
  HttpApiOptions options_;
};

// ---- helpers, exposed for tests ----

// Decodes %XX escapes; with `plus_is_space` (query strings) '+' becomes ' '.
// nullopt for a '%' not followed by two hex digits.
std::optional<std::string> PercentDecode(std::string_view text, bool plus_is_space);

// The decoded value of the first `key=value` pair named `key` in a query string
// (the part after '?', pairs separated by '&'); "" for a bare `key`; nullopt
// when absent, or when badly encoded (then *malformed, if given, is set true).
std::optional<std::string> QueryParameter(std::string_view query, std::string_view key,
                                          bool* malformed = nullptr);


std::string SeriesSummaryToJson(const SeriesSummary& summary);
std::string SeriesDetailToJson(const SeriesDetail& detail);
std::string IngestReceiptToJson(const IngestReceipt& receipt);
// {"series":..., "forecasts":[{"at", "value", "sd", "level", "low", "high",
// "horizon_seconds"}...], "next_reading": {"last", "expected", "quantiles":
// [{"probability", "at"}...]} or null, with "next_reading_unknown": why}.
std::string SeriesForecastToJson(const SeriesForecast& forecast);

// The forecasts of one series' monitor at `at` (see ServiceView::ForecastSeries),
// shared by the service and `plumbline forecast`.
StatusOr<SeriesForecast> MakeSeriesForecast(const SeriesMonitor& monitor,
                                            std::string name,
                                            const std::vector<EventTime>& at,
                                            double level);

// The HTTP status for a failed Status: 400 InvalidArgument and OutOfRange,
// 404 NotFound, 409 FailedPrecondition, 503 Unavailable, else 500.
unsigned HttpStatusFor(const Status& status);

}  // namespace plumbline
