#include "daemon/http_api.h"

#include <charconv>
#include <cmath>
#include <limits>

#include "daemon/ui_pages.h"
#include "detectors/glob.h"
#include "detectors/time_format.h"

namespace plumbline {
namespace {

constexpr std::string_view kSeriesPrefix = "/v1/series/";
constexpr std::string_view kForecastSuffix = "/forecast";
constexpr std::string_view kAnnotationsPath = "/v1/annotations";
constexpr std::string_view kAnnotationPrefix = "/v1/annotations/";
// Times one forecast request may ask for (each costs one O(n^2) prediction).
constexpr std::size_t kMaxForecastTimes = 1000;

int HexDigit(char c) {
  if (c >= '0' && c <= '9') return c - '0';
  if (c >= 'a' && c <= 'f') return c - 'a' + 10;
  if (c >= 'A' && c <= 'F') return c - 'A' + 10;
  return -1;
}


void AppendKey(std::string_view key, std::string* out) {
  AppendJsonString(key, out);
  out->push_back(':');
}

void AppendTime(EventTime time, std::string* out) {
  out->push_back('"');
  AppendRfc3339(time, out);
  out->push_back('"');
}

void AppendSummaryFields(const SeriesSummary& s, std::string* out) {
  AppendKey("name", out);
  AppendJsonString(s.name, out);
  *out += ',';
  AppendKey("kind", out);
  AppendJsonString(s.kind, out);
  *out += ',';
  AppendKey("readings", out);
  *out += std::to_string(s.readings);
  *out += ',';
  AppendKey("last_time", out);
  if (s.readings > 0) {
    AppendTime(s.last_time, out);
  } else {
    *out += "null";
  }
  *out += ',';
  AppendKey("last_value", out);
  if (s.readings > 0) {
    AppendJsonNumber(s.last_value, out);
  } else {
    *out += "null";
  }
  *out += ',';
  AppendKey("armed", out);
  *out += s.armed ? "true" : "false";
  *out += ',';
  AppendKey("silent", out);
  *out += s.silent ? "true" : "false";
  *out += ',';
  AppendKey("state", out);
  AppendJsonString(ToString(s.state), out);
  *out += ',';
  AppendKey("alert_count", out);
  *out += std::to_string(s.alert_count);
  *out += ',';
  AppendKey("last_change_at", out);
  if (s.last_change_at) {
    AppendTime(*s.last_change_at, out);
  } else {
    *out += "null";
  }
}

ApiResponse JsonError(unsigned status, std::string_view route, std::string_view message) {
  ApiResponse response;
  response.status = status;
  response.route = route;
  response.body = "{\"error\":";
  AppendJsonString(message, &response.body);
  response.body += "}\n";
  return response;
}

ApiResponse MethodNotAllowed(std::string_view route, std::string_view allow) {
  ApiResponse response = JsonError(405, route, "method not allowed");
  response.allow = std::string(allow);
  return response;
}

ApiResponse PlainText(unsigned status, std::string_view route, std::string body) {
  ApiResponse response;
  response.status = status;
  response.route = route;
  response.content_type = "text/plain; charset=utf-8";
  response.body = std::move(body);
  return response;
}

}  // namespace

constexpr std::string_view kSeriesStateNames[] = {"settling", "steady", "shifted",
                                                  "quiet", "held"};

std::string_view ToString(SeriesState state) {
  return kSeriesStateNames[static_cast<int>(state)];
}

std::optional<SeriesState> SeriesStateFromString(std::string_view text) {
  for (int i = 0; i < 5; ++i) {
    if (kSeriesStateNames[i] == text) return static_cast<SeriesState>(i);
  }
  return std::nullopt;
}

// ---- helpers ----

std::optional<std::string> PercentDecode(std::string_view text, bool plus_is_space) {
  std::string out;
  out.reserve(text.size());
  for (std::size_t i = 0; i < text.size(); ++i) {
    const char c = text[i];
    if (c == '%') {
      const int high = i + 1 < text.size() ? HexDigit(text[i + 1]) : -1;
      const int low = i + 2 < text.size() ? HexDigit(text[i + 2]) : -1;
      if (high < 0 || low < 0) return std::nullopt;
      out.push_back(static_cast<char>(high * 16 + low));
      i += 2;
    } else if (c == '+' && plus_is_space) {
      out.push_back(' ');
    } else {
      out.push_back(c);
    }
  }
  return out;
}

std::optional<std::string> QueryParameter(std::string_view query, std::string_view key,
                                          bool* malformed) {
  if (malformed) *malformed = false;
  while (!query.empty()) {
    const std::size_t amp = query.find('&');
    const std::string_view pair = query.substr(0, amp);
    query = amp == std::string_view::npos ? std::string_view() : query.substr(amp + 1);
    const std::size_t eq = pair.find('=');
    const std::optional<std::string> name = PercentDecode(pair.substr(0, eq), true);
    if (!name || *name != key) continue;
    if (eq == std::string_view::npos) return std::string();
    std::optional<std::string> value = PercentDecode(pair.substr(eq + 1), true);
    if (!value && malformed) *malformed = true;
    return value;
  }
  return std::nullopt;
}

std::string SeriesSummaryToJson(const SeriesSummary& summary) {
  std::string out = "{";
  AppendSummaryFields(summary, &out);
  out += '}';
  return out;
}

std::string SeriesDetailToJson(const SeriesDetail& d) {
  std::string out = "{";
  AppendSummaryFields(d.summary, &out);
  const auto number = [&out](std::string_view key, double value) {
    out += ',';
    AppendKey(key, &out);
    AppendJsonNumber(value, &out);
  };
  number("forecast", d.forecast);
  number("band_low", d.band_low);
  number("band_high", d.band_high);
  number("sigma", d.sigma);
  number("last_z", d.last_z);
  out += ",\"calibration\":{";
  const SeriesDetail::Calibration& c = d.calibration;
  AppendKey("autocorrelation", &out);
  AppendJsonNumber(c.autocorrelation, &out);
  number("variance", c.variance);
  number("lag1", c.lag1);
  number("tail_share", c.tail_share);
  number("drift_ratio", c.drift_ratio);
  out += ',';
  AppendKey("level_chart", &out);
  AppendJsonString(c.level_chart, &out);
  number("adapted_threshold", c.adapted_threshold);
  out += '}';
  out += ",\"detectors\":[";
  for (std::size_t i = 0; i < d.detectors.size(); ++i) {
    if (i) out += ',';
    out += "{\"name\":";
    AppendJsonString(d.detectors[i].name, &out);
    out += ",\"statistic\":";
    AppendJsonNumber(d.detectors[i].statistic, &out);
    out += ",\"threshold\":";
    AppendJsonNumber(d.detectors[i].threshold, &out);
    out += '}';
  }
  out += "],\"run_length\":";
  if (d.run_length) {
    out += "{\"most_likely\":";
    AppendJsonNumber(d.run_length->most_likely, &out);
    out += ",\"change_probability\":";
    AppendJsonNumber(d.run_length->change_probability, &out);
    out += '}';
  } else {
    out += "null";
  }
  out += ",\"recent_points\":[";
  for (std::size_t i = 0; i < d.recent_points.size(); ++i) {
    if (i) out += ',';
    out += "{\"time\":";
    AppendTime(d.recent_points[i].time, &out);
    out += ",\"value\":";
    AppendJsonNumber(d.recent_points[i].value, &out);
    out += ",\"forecast\":";
    AppendJsonNumber(d.recent_points[i].forecast, &out);
    out += ",\"band_low\":";
    AppendJsonNumber(d.recent_points[i].band_low, &out);
    out += ",\"band_high\":";
    AppendJsonNumber(d.recent_points[i].band_high, &out);
    out += '}';
  }
  out += "],\"annotations\":[";
  for (std::size_t i = 0; i < d.annotations.size(); ++i) {
    const SeriesDetail::Span& span = d.annotations[i];
    if (i) out += ',';
    out += "{\"id\":";
    AppendJsonString(span.id, &out);
    out += ",\"kind\":";
    AppendJsonString(span.kind, &out);
    out += ",\"from\":";
    AppendTime(span.from, &out);
    out += ",\"to\":";
    AppendTime(span.to, &out);
    out += ",\"note\":";
    AppendJsonString(span.note, &out);
    out += '}';
  }
  out += "],\"recent_alerts\":[";
  for (std::size_t i = 0; i < d.recent_alerts.size(); ++i) {
    if (i) out += ',';
    out += AlertToJson(d.recent_alerts[i]);
  }
  out += "]}";
  return out;
}

std::string IngestReceiptToJson(const IngestReceipt& receipt) {
  std::string out = "{\"accepted\":" + std::to_string(receipt.accepted) +
                    ",\"rejected\":" + std::to_string(receipt.rejected) + ",\"errors\":[";
  for (std::size_t i = 0; i < receipt.first_rejections.size(); ++i) {
    if (i) out += ',';
    out += "{\"line\":" + std::to_string(receipt.first_rejections[i].line) + ",\"reason\":";
    AppendJsonString(receipt.first_rejections[i].reason, &out);
    out += '}';
  }
  out += "]}";
  return out;
}

std::string SeriesForecastToJson(const SeriesForecast& f) {
  std::string out = "{\"series\":";
  AppendJsonString(f.name, &out);
  out += ",\"forecasts\":[";
  for (std::size_t i = 0; i < f.readings.size(); ++i) {
    const ReadingForecast& r = f.readings[i];
    if (i) out += ',';
    out += "{\"at\":";
    AppendTime(r.at, &out);
    const auto number = [&out](std::string_view key, double value) {
      out += ',';
      AppendKey(key, &out);
      AppendJsonNumber(value, &out);
    };
    number("value", r.value);
    number("sd", r.sd);
    number("level", r.level);
    number("low", r.low);
    number("high", r.high);
    number("horizon_seconds", ToSeconds(r.horizon));
    out += '}';
  }
  out += "],\"next_reading\":";
  if (f.next) {
    out += "{\"last\":";
    AppendTime(f.next->last, &out);
    out += ",\"expected\":";
    AppendTime(f.next->expected, &out);
    out += ",\"quantiles\":[";
    for (std::size_t i = 0; i < f.next->quantiles.size(); ++i) {
      if (i) out += ',';
      out += "{\"probability\":";
      AppendJsonNumber(f.next->quantiles[i].probability, &out);
      out += ",\"at\":";
      AppendTime(f.next->quantiles[i].time, &out);
      out += '}';
    }
    out += "]}";
  } else {
    out += "null,\"next_reading_unknown\":";
    AppendJsonString(f.next_unknown, &out);
  }
  out += '}';
  return out;
}

StatusOr<SeriesForecast> MakeSeriesForecast(const SeriesMonitor& monitor,
                                            std::string name,
                                            const std::vector<EventTime>& at,
                                            double level) {
  SeriesForecast out;
  out.name = std::move(name);
  StatusOr<NextReadingForecast> next = ForecastNextReading(monitor);
  if (next.ok()) {
    out.next = *next;
  } else {
    out.next_unknown = next.status().message();
  }
  std::vector<EventTime> times = at;
  if (times.empty()) {
    // Without a time: the next reading's expected time.
    if (!out.next) {
      return Status::FailedPrecondition("no time given (at=...) and " + out.next_unknown);
    }
    times.push_back(out.next->expected);
  }
  for (EventTime t : times) {
    StatusOr<ReadingForecast> reading = ForecastReading(monitor, t, level);
    if (!reading.ok()) return reading.status();
    out.readings.push_back(*reading);
  }
  return out;
}

unsigned HttpStatusFor(const Status& status) {
  switch (status.code()) {
    case Status::Code::kInvalidArgument:
    case Status::Code::kOutOfRange:
      return 400;
    case Status::Code::kNotFound:
      return 404;
    case Status::Code::kFailedPrecondition:
      return 409;
    case Status::Code::kUnavailable:
      return 503;
    default:
      return 500;
  }
}

// ---- routes ----

bool HttpApiOptions::IsValid(std::string* why) const {
  if (default_series_limit < 1 || default_series_limit > max_series_limit ||
      max_series_limit > 10'000'000) {
    if (why) *why = "need 1 <= default_series_limit <= max_series_limit <= 10000000";
    return false;
  }
  return true;
}

HttpApi::HttpApi(ServiceView& view, ServiceMetrics* metrics, HttpApiOptions options)
    : view_(view), metrics_(metrics), options_(options) {}

ApiResponse HttpApi::Handle(std::string_view method, std::string_view target,
                            std::string_view body) const {
  const std::size_t question = target.find('?');
  const std::string_view path = target.substr(0, question);
  const std::string_view query =
      question == std::string_view::npos ? std::string_view() : target.substr(question + 1);
  const bool get = method == "GET" || method == "HEAD";
  constexpr std::string_view kGetHead = "GET, HEAD";

  if (path == "/v1/readings") {
    if (method != "POST") return MethodNotAllowed("readings", "POST");
    return PostReadings(body);
  }
  if (path == "/v1/series") {
    if (!get) return MethodNotAllowed("series", kGetHead);
    return ListSeries(query);
  }
  if (path.starts_with(kSeriesPrefix) && path.ends_with(kForecastSuffix) &&
      path.size() > kSeriesPrefix.size() + kForecastSuffix.size()) {
    if (!get) return MethodNotAllowed("series_forecast", kGetHead);
    return GetForecast(
        path.substr(kSeriesPrefix.size(),
                    path.size() - kSeriesPrefix.size() - kForecastSuffix.size()),
        query);
  }
  if (path.starts_with(kSeriesPrefix)) {
    if (!get) return MethodNotAllowed("series_detail", kGetHead);
    return GetSeries(path.substr(kSeriesPrefix.size()));
  }
  if (path == "/v1/alerts") {
    if (!get) return MethodNotAllowed("alerts", kGetHead);
    return ListAlerts(query);
  }
  if (path == kAnnotationsPath) {
    if (method == "POST") return CreateAnnotation(body);
    if (!get) return MethodNotAllowed("annotations", "GET, HEAD, POST");
    return ListAnnotations();
  }
  if (path.starts_with(kAnnotationPrefix)) {
    if (method != "DELETE") return MethodNotAllowed("annotation", "DELETE");
    return DeleteAnnotation(path.substr(kAnnotationPrefix.size()));
  }
  if (path == "/") {
    if (!get) return MethodNotAllowed("status_page", kGetHead);
    ApiResponse response;
    response.route = "status_page";
    response.content_type = "text/html; charset=utf-8";
    response.body = StatusPageHtml();
    return response;
  }
  if (path == "/healthz") {
    if (!get) return MethodNotAllowed("healthz", kGetHead);
    return PlainText(200, "healthz", "ok\n");
  }
  if (path == "/readyz") {
    if (!get) return MethodNotAllowed("readyz", kGetHead);
    return Ready();
  }
  if (path == "/metrics" && metrics_ != nullptr) {
    if (!get) return MethodNotAllowed("metrics", kGetHead);
    return Metrics();
  }
  return JsonError(404, "other", "no such path");
}

ApiResponse HttpApi::PostReadings(std::string_view body) const {
  const IngestReceipt receipt = view_.IngestLines(body);
  if (receipt.overloaded) {
    return JsonError(503, "readings",
                     "overloaded: readings in flight fill the ingest memory budget; nothing "
                     "was taken, send the body again after Retry-After");
  }
  ApiResponse response;
  response.route = "readings";
  response.body = IngestReceiptToJson(receipt) + "\n";
  return response;
}

ApiResponse HttpApi::ListSeries(std::string_view query) const {
  bool malformed = false;
  std::string glob = QueryParameter(query, "match", &malformed).value_or("");
  if (malformed) return JsonError(400, "series", "bad percent-encoding in match");
  if (!glob.empty()) {
    if (Status status = ValidateGlob(glob); !status.ok()) {
      return JsonError(400, "series", "bad match pattern: " + status.message());
    }
  }
  std::size_t limit = options_.default_series_limit;
  if (auto text = QueryParameter(query, "limit", &malformed)) {
    std::size_t parsed = 0;
    const auto [end, error] = std::from_chars(text->data(), text->data() + text->size(), parsed);
    if (error != std::errc() || end != text->data() + text->size() || parsed < 1 ||
        parsed > options_.max_series_limit) {
      return JsonError(400, "series",
                       "limit must be an integer in [1, " +
                           std::to_string(options_.max_series_limit) + "]");
    }
    limit = parsed;
  } else if (malformed) {
    return JsonError(400, "series", "bad percent-encoding in limit");
  }
  const std::vector<SeriesSummary> rows = view_.ListSeries(glob);
  const std::size_t shown = std::min(limit, rows.size());
  ApiResponse response;
  response.route = "series";
  std::string& out = response.body;
  out = "{\"matched\":" + std::to_string(rows.size()) + ",\"truncated\":" +
        (shown < rows.size() ? "true" : "false") + ",\"series\":[";
  for (std::size_t i = 0; i < shown; ++i) {
    if (i) out += ',';
    out += '{';
    AppendSummaryFields(rows[i], &out);
    out += '}';
  }
  out += "]}\n";
  return response;
}

ApiResponse HttpApi::GetSeries(std::string_view encoded_name) const {
  const std::optional<std::string> name = PercentDecode(encoded_name, false);
  if (!name) return JsonError(400, "series_detail", "bad percent-encoding in the series name");
  if (name->empty()) return JsonError(404, "series_detail", "no series name in the path");
  const std::optional<SeriesDetail> detail = view_.GetSeries(*name);
  if (!detail) return JsonError(404, "series_detail", "no series named " + *name);
  ApiResponse response;
  response.route = "series_detail";
  response.body = SeriesDetailToJson(*detail) + "\n";
  return response;
}

ApiResponse HttpApi::ListAlerts(std::string_view query) const {
  EventTime since = std::numeric_limits<EventTime>::min();
  bool malformed = false;
  const std::optional<std::string> text = QueryParameter(query, "since", &malformed);
  if (malformed) return JsonError(400, "alerts", "bad percent-encoding in since");
  if (text) {
    StatusOr<EventTime> parsed = ParseTime(*text);
    if (!parsed.ok()) {
      return JsonError(400, "alerts",
                       "since must be RFC 3339 or epoch seconds: " + parsed.status().message());
    }
    since = *parsed;
  }
  const std::vector<Alert> alerts = view_.AlertsSince(since);
  ApiResponse response;
  response.route = "alerts";
  std::string& out = response.body;
  out = "{\"count\":" + std::to_string(alerts.size()) + ",\"alerts\":[";
  for (std::size_t i = 0; i < alerts.size(); ++i) {
    if (i) out += ',';
    out += AlertToJson(alerts[i]);
  }
  out += "]}\n";
  return response;
}

ApiResponse HttpApi::GetForecast(std::string_view encoded_name,
                                 std::string_view query) const {
  constexpr std::string_view kRoute = "series_forecast";
  const std::optional<std::string> name = PercentDecode(encoded_name, false);
  if (!name) return JsonError(400, kRoute, "bad percent-encoding in the series name");
  bool malformed = false;
  double level = 0.95;
  if (auto text = QueryParameter(query, "level", &malformed)) {
    const auto [end, error] =
        std::from_chars(text->data(), text->data() + text->size(), level);
    if (error != std::errc() || end != text->data() + text->size() ||
        !(level > 0.0 && level < 1.0)) {
      return JsonError(400, kRoute, "level must be a number in (0, 1), such as 0.95");
    }
  } else if (malformed) {
    return JsonError(400, kRoute, "bad percent-encoding in level");
  }
  std::vector<EventTime> at;
  if (auto text = QueryParameter(query, "at", &malformed)) {
    std::string_view rest = *text;
    while (true) {
      const std::size_t comma = rest.find(',');
      const std::string_view item = rest.substr(0, comma);
      StatusOr<EventTime> parsed = ParseTime(item);
      if (!parsed.ok()) {
        return JsonError(
            400, kRoute,
            "at must be RFC 3339 or epoch seconds (several: comma-separated): " +
                parsed.status().message());
      }
      at.push_back(*parsed);
      if (comma == std::string_view::npos) break;
      rest.remove_prefix(comma + 1);
    }
    if (at.size() > kMaxForecastTimes) {
      return JsonError(
          400, kRoute,
          "at names more than " + std::to_string(kMaxForecastTimes) + " times");
    }
  } else if (malformed) {
    return JsonError(400, kRoute, "bad percent-encoding in at");
  }
  StatusOr<SeriesForecast> forecast = view_.ForecastSeries(*name, at, level);
  if (!forecast.ok()) {
    return JsonError(HttpStatusFor(forecast.status()), kRoute,
                     forecast.status().message());
  }
  ApiResponse response;
  response.route = kRoute;
  response.body = SeriesForecastToJson(*forecast) + "\n";
  return response;
}

ApiResponse HttpApi::ListAnnotations() const {
  const std::vector<AnnotationEntry> entries = view_.ListAnnotations();
  ApiResponse response;
  response.route = "annotations";
  std::string& out = response.body;
  out = "{\"count\":" + std::to_string(entries.size()) + ",\"annotations\":[";
  for (std::size_t i = 0; i < entries.size(); ++i) {
    if (i) out += ',';
    out += AnnotationToJson(entries[i].annotation,
                            entries[i].from_config ? "config" : "api");
  }
  out += "]}\n";
  return response;
}

ApiResponse HttpApi::CreateAnnotation(std::string_view body) const {
  StatusOr<Annotation> created = view_.CreateAnnotation(body);
  if (!created.ok()) {
    return JsonError(HttpStatusFor(created.status()), "annotations",
                     created.status().message());
  }
  ApiResponse response;
  response.status = 201;
  response.route = "annotations";
  response.body = AnnotationToJson(*created, "api") + "\n";
  return response;
}

ApiResponse HttpApi::DeleteAnnotation(std::string_view encoded_id) const {
  const std::optional<std::string> id = PercentDecode(encoded_id, false);
  if (!id)
    return JsonError(400, "annotation", "bad percent-encoding in the annotation id");
  const Status status = view_.DeleteAnnotation(*id);
  if (!status.ok())
    return JsonError(HttpStatusFor(status), "annotation", status.message());
  ApiResponse response;
  response.route = "annotation";
  response.body = "{\"deleted\":";
  AppendJsonString(*id, &response.body);
  response.body += "}\n";
  return response;
}

ApiResponse HttpApi::Ready() const {
  std::string why;
  const bool ready = view_.Ready(&why);
  if (metrics_ != nullptr) metrics_->SetReady(ready);
  if (ready) return PlainText(200, "readyz", "ready\n");
  return PlainText(503, "readyz", "not ready: " + (why.empty() ? "no reason given" : why) + "\n");
}

ApiResponse HttpApi::Metrics() const {
  std::string why;
  metrics_->SetReady(view_.Ready(&why));
  // Per-series detector gauges (at most max_detector_series series), as of now.
  for (const auto& [name, gauges] : metrics_->AdmittedSeries()) {
    const std::optional<SeriesDetail> detail = view_.GetSeries(name);
    if (!detail) continue;
    for (const SeriesDetail::DetectorState& d : detail->detectors) {
      gauges->Set(d.name, d.statistic, d.threshold);
    }
    const SeriesDetail::Calibration& c = detail->calibration;
    gauges->SetCalibration("autocorrelation", c.autocorrelation);
    gauges->SetCalibration("variance", c.variance);
    gauges->SetCalibration("lag1", c.lag1);
    gauges->SetCalibration("tail_share", c.tail_share);
    gauges->SetCalibration("drift_ratio", c.drift_ratio);
  }
  ApiResponse response;
  response.route = "metrics";
  response.content_type = std::string(kPrometheusTextContentType);
  response.body = metrics_->Serialize();
  return response;
}

}  // namespace plumbline
