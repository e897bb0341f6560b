// HttpApi: the routes of Plumbline's HTTP API as a pure function from a
// request (method, target, body) to a response, with no sockets, so every route
// is testable without a network. HttpServer (http_server.h) carries requests
// to it and responses back.
//
//   POST /v1/readings            body of reading lines -> accepted, rejected, first errors
//   GET  /v1/series?match=GLOB   series whose names match (all without match), sorted;
//                                &limit=N caps the rows (default 1000, at most 100000)
//   GET  /v1/series/{name}       one series in detail; {name} is the rest of the path,
//                                percent-decoded ('/' is part of series names)
//   GET  /v1/alerts?since=T      alerts and events at or after T (RFC 3339 or epoch seconds)
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

#include "daemon/metrics.h"
#include "daemon/service_view.h"
#include "daemon/text.h"

namespace plumbline {

struct ApiResponse {
  unsigned status = 200;
  std::string content_type = "application/json";
  std::string body;
  std::string allow;  // the Allow header of a 405
  // The route label for metrics: "readings", "series", "series_detail", "alerts",
  // "healthz", "readyz", "metrics", or "other" (unknown paths).
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

}  // namespace plumbline
