// HttpServer and HttpApi: every route, the error answers, percent-decoding,
// size limits, keep-alive, concurrent clients and staged shutdown, over real
// loopback sockets against a FakeServiceView. Status codes and header rules
// follow RFC 9110 (HTTP semantics: 404, 405 with Allow, 413, 431 from
// RFC 6585, HEAD) and RFC 9112 (HTTP/1.1 keep-alive, 100-continue); from
// memory. Response bodies are checked as JSON by parsing them with yaml-cpp
// (JSON is a subset of YAML 1.2 flow style).
#include "daemon/http_server.h"

#include <gtest/gtest.h>
#include <yaml-cpp/yaml.h>

#include <utility>
#include <atomic>
#include <boost/asio/connect.hpp>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/asio/read.hpp>
#include <boost/asio/write.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <cstdio>
#include <cstdlib>
#include <fstream>
#include <future>
#include <optional>
#include <string>
#include <thread>
#include <vector>

#include "daemon/access.h"
#include "daemon/http_api.h"
#include "daemon/metrics.h"
#include "detectors/time_format.h"
#include "tests/support/fake_service_view.h"

namespace plumbline {
namespace {

namespace net = boost::asio;
namespace beast = boost::beast;
namespace http = beast::http;
using tcp = net::ip::tcp;
using plumbline::testing::FakeServiceView;

struct Reply {
  unsigned status = 0;
  std::string content_type;
  std::string allow;
  std::string connection;
  std::string content_length;
  std::string retry_after;
  std::string www_authenticate;
  std::string body;
  bool keep_alive = false;
};

Reply ToReply(http::response<http::string_body>& res) {
  Reply reply;
  reply.status = res.result_int();
  reply.content_type = std::string(res[http::field::content_type]);
  reply.allow = std::string(res[http::field::allow]);
  reply.connection = std::string(res[http::field::connection]);
  reply.content_length = std::string(res[http::field::content_length]);
  reply.retry_after = std::string(res[http::field::retry_after]);
  reply.www_authenticate = std::string(res[http::field::www_authenticate]);
  reply.body = res.body();
  reply.keep_alive = res.keep_alive();
  return reply;
}

// A blocking HTTP/1.1 client on one connection (keep-alive).
class Client {
 public:
  explicit Client(unsigned short port) : socket_(io_) {
    socket_.connect(tcp::endpoint(net::ip::make_address("127.0.0.1"), port));
  }

  Reply Send(http::verb method, std::string_view target, std::string body = "",
             std::vector<std::pair<http::field, std::string>> headers = {}) {
    http::request<http::string_body> req{method, std::string(target), 11};
    req.set(http::field::host, "127.0.0.1");
    for (auto& [field, value] : headers) req.set(field, value);
    req.body() = std::move(body);
    req.prepare_payload();
    http::write(socket_, req);
    return Read(method == http::verb::head);
  }

  Reply Read(bool head = false) {
    http::response_parser<http::string_body> parser;
    parser.body_limit(64u << 20);
    parser.skip(head);
    http::read(socket_, buffer_, parser);
    return ToReply(parser.get());
  }

  // Writes raw bytes (for malformed requests).
  void WriteRaw(std::string_view bytes) { net::write(socket_, net::buffer(bytes)); }

  // True when the server has closed the connection (a read gets end of file or
  // a reset) rather than sending anything.
  bool ReadsEndOfStream() {
    char byte;
    beast::error_code ec;
    socket_.read_some(net::buffer(&byte, 1), ec);
    return ec == net::error::eof || ec == net::error::connection_reset;
  }

  tcp::socket& socket() { return socket_; }

 private:
  net::io_context io_;
  tcp::socket socket_;
  beast::flat_buffer buffer_;
};

YAML::Node Json(const std::string& body) { return YAML::Load(body); }

constexpr char kReadings[] =
    "time,series,value\n"
    "2026-03-01T12:00:00Z,coldstore/freezer-1/temp_c,-18.5\n"
    "{\"time\": \"2026-03-01T12:01:00Z\", \"series\": \"coldstore/freezer-1/temp_c\", "
    "\"value\": -18.25}\n"
    "2026-03-01T12:00:00Z,coldstore/compressor-2/power_kw,4.5\n"
    "not a reading\n"
    "2026-03-01T12:02:00Z,coldstore/freezer-1/temp_c,warm\n"
    "1772366400,coldstore/dock/door_openings,1\n";

class HttpServerTest : public ::testing::Test {
 protected:
  void StartServer(HttpServerOptions options = {}) {
    metrics_.emplace(ServiceMetricsOptions{});
    view_.emplace(&*metrics_);
    server_.emplace(io_, tcp::endpoint(net::ip::make_address("127.0.0.1"), 0), *view_,
                    &*metrics_, options,
                    [this](HttpLogLevel level, std::string_view message) {
                      if (level != HttpLogLevel::kInfo) {
                        std::lock_guard<std::mutex> lock(log_mutex_);
                        logged_.push_back(std::string(message));
                      }
                    });
    ASSERT_TRUE(server_->Start().ok());
    port_ = server_->local_endpoint().port();
    work_.emplace(net::make_work_guard(io_));
    for (int i = 0; i < 2; ++i) threads_.emplace_back([this] { io_.run(); });
  }

  void TearDown() override {
    if (server_) {
      server_->Stop(std::chrono::milliseconds(2000));
      EXPECT_TRUE(server_->WaitStopped(std::chrono::seconds(10)));
    }
    work_.reset();
    io_.stop();
    for (auto& t : threads_) t.join();
    server_.reset();
    std::lock_guard<std::mutex> lock(log_mutex_);
    EXPECT_TRUE(logged_.empty()) << "unexpected warning: " << logged_.front();
  }

  Reply Get(std::string_view target) {
    return Client(port_).Send(http::verb::get, target);
  }
  Reply Post(std::string_view target, std::string body) {
    return Client(port_).Send(http::verb::post, target, std::move(body));
  }

  net::io_context io_;
  std::optional<net::executor_work_guard<net::io_context::executor_type>> work_;
  std::vector<std::thread> threads_;
  std::optional<ServiceMetrics> metrics_;
  std::optional<FakeServiceView> view_;
  std::optional<HttpServer> server_;
  unsigned short port_ = 0;
  std::mutex log_mutex_;
  std::vector<std::string> logged_;
};

// ---- routes ----

TEST_F(HttpServerTest, HealthzAnswersOkInPlainText) {
  StartServer();
  const Reply reply = Get("/healthz");
  EXPECT_EQ(reply.status, 200u);
  EXPECT_EQ(reply.body, "ok\n");
  EXPECT_EQ(reply.content_type, "text/plain; charset=utf-8");
}

TEST_F(HttpServerTest, ReadyzIs503WithTheReasonUntilReady) {
  StartServer();
  view_->SetReady(false, "alert log: fsync failed: No space left on device");
  Reply reply = Get("/readyz");
  EXPECT_EQ(reply.status, 503u);
  EXPECT_EQ(reply.body, "not ready: alert log: fsync failed: No space left on device\n");
  view_->SetReady(true);
  reply = Get("/readyz");
  EXPECT_EQ(reply.status, 200u);
  EXPECT_EQ(reply.body, "ready\n");
}

TEST_F(HttpServerTest, PostReadingsCountsAcceptedAndRejectedWithLineNumbers) {
  StartServer();
  const Reply reply = Post("/v1/readings", kReadings);
  ASSERT_EQ(reply.status, 200u) << reply.body;
  EXPECT_EQ(reply.content_type, "application/json");
  const YAML::Node json = Json(reply.body);
  EXPECT_EQ(json["accepted"].as<int>(), 4);
  EXPECT_EQ(json["rejected"].as<int>(), 2);
  ASSERT_EQ(json["errors"].size(), 2u);
  EXPECT_EQ(json["errors"][0]["line"].as<int>(), 5);  // the header is line 1
  EXPECT_EQ(json["errors"][0]["reason"].as<std::string>(), "wrong_field_count");
  EXPECT_EQ(json["errors"][1]["line"].as<int>(), 6);
  EXPECT_EQ(json["errors"][1]["reason"].as<std::string>(), "bad_value");
  EXPECT_EQ(view_->total_accepted(), 4u);
}

TEST_F(HttpServerTest, EmptyBodyAcceptsNothing) {
  StartServer();
  const Reply reply = Post("/v1/readings", "");
  EXPECT_EQ(reply.status, 200u);
  EXPECT_EQ(Json(reply.body)["accepted"].as<int>(), 0);
}

TEST_F(HttpServerTest, BodyOverTheLimitIs413AndClosesTheConnection) {
  StartServer(HttpServerOptions{.max_body_bytes = 4096});
  std::string body;
  while (body.size() <= 4096) body += "2026-03-01T12:00:00Z,coldstore/freezer-1/temp_c,-18.5\n";
  Client client(port_);
  const Reply reply = client.Send(http::verb::post, "/v1/readings", body);
  EXPECT_EQ(reply.status, 413u);
  EXPECT_FALSE(reply.keep_alive);
  EXPECT_NE(Json(reply.body)["error"].as<std::string>().find("4096"), std::string::npos);
  EXPECT_TRUE(client.ReadsEndOfStream());
  EXPECT_EQ(view_->total_accepted(), 0u);
  // A body at the limit is taken.
  body.resize(4096);
  body.resize(body.rfind('\n') + 1);
  EXPECT_EQ(Post("/v1/readings", body).status, 200u);
}

TEST_F(HttpServerTest, ChunkedBodyOverTheLimitIs413) {
  StartServer(HttpServerOptions{.max_body_bytes = 2048});
  Client client(port_);
  client.WriteRaw(
      "POST /v1/readings HTTP/1.1\r\nHost: x\r\nTransfer-Encoding: chunked\r\n\r\n");
  const std::string chunk(1000, 'x');
  for (int i = 0; i < 3; ++i) client.WriteRaw("3e8\r\n" + chunk + "\r\n");
  client.WriteRaw("0\r\n\r\n");
  EXPECT_EQ(client.Read().status, 413u);
}

TEST_F(HttpServerTest, ExpectContinueOverTheLimitIs413BeforeTheBodyIsSent) {
  StartServer(HttpServerOptions{.max_body_bytes = 2048});
  Client client(port_);
  client.WriteRaw(
      "POST /v1/readings HTTP/1.1\r\nHost: x\r\nContent-Length: 100000\r\n"
      "Expect: 100-continue\r\n\r\n");
  EXPECT_EQ(client.Read().status, 413u);  // no body was sent
}

TEST_F(HttpServerTest, ExpectContinueWithinTheLimitGetsContinueThenTheAnswer) {
  StartServer();
  Client client(port_);
  const std::string body = "2026-03-01T12:00:00Z,coldstore/freezer-1/temp_c,-18.5\n";
  client.WriteRaw("POST /v1/readings HTTP/1.1\r\nHost: x\r\nContent-Length: " +
                  std::to_string(body.size()) + "\r\nExpect: 100-continue\r\n\r\n");
  EXPECT_EQ(client.Read().status, 100u);
  client.WriteRaw(body);
  const Reply reply = client.Read();
  EXPECT_EQ(reply.status, 200u);
  EXPECT_EQ(Json(reply.body)["accepted"].as<int>(), 1);
}

TEST_F(HttpServerTest, SeriesListIsSortedAndFilteredByGlob) {
  StartServer();
  ASSERT_EQ(Post("/v1/readings", kReadings).status, 200u);
  YAML::Node json = Json(Get("/v1/series").body);
  ASSERT_EQ(json["series"].size(), 3u);
  EXPECT_EQ(json["matched"].as<int>(), 3);
  EXPECT_FALSE(json["truncated"].as<bool>());
  EXPECT_EQ(json["series"][0]["name"].as<std::string>(), "coldstore/compressor-2/power_kw");
  EXPECT_EQ(json["series"][2]["name"].as<std::string>(), "coldstore/freezer-1/temp_c");
  EXPECT_EQ(json["series"][2]["readings"].as<int>(), 2);
  EXPECT_EQ(json["series"][2]["last_time"].as<std::string>(), "2026-03-01T12:01:00Z");
  EXPECT_DOUBLE_EQ(json["series"][2]["last_value"].as<double>(), -18.25);

  // `*` stops at '/', `**` crosses it; the glob arrives percent-encoded.
  json = Json(Get("/v1/series?match=coldstore%2F*%2Ftemp_c").body);
  ASSERT_EQ(json["series"].size(), 1u);
  EXPECT_EQ(json["series"][0]["name"].as<std::string>(), "coldstore/freezer-1/temp_c");
  json = Json(Get("/v1/series?match=coldstore/**").body);
  EXPECT_EQ(json["series"].size(), 3u);
  json = Json(Get("/v1/series?match=coldstore/*").body);
  EXPECT_EQ(json["series"].size(), 0u);
}

TEST_F(HttpServerTest, SeriesListLimitTruncates) {
  StartServer();
  ASSERT_EQ(Post("/v1/readings", kReadings).status, 200u);
  const YAML::Node json = Json(Get("/v1/series?limit=2").body);
  EXPECT_EQ(json["series"].size(), 2u);
  EXPECT_EQ(json["matched"].as<int>(), 3);
  EXPECT_TRUE(json["truncated"].as<bool>());
  EXPECT_EQ(Get("/v1/series?limit=0").status, 400u);
  EXPECT_EQ(Get("/v1/series?limit=ten").status, 400u);
}

TEST_F(HttpServerTest, BadGlobOrBadEncodingIs400) {
  StartServer();
  Reply reply = Get("/v1/series?match=coldstore%2F%5Bab");  // "coldstore/[ab"
  EXPECT_EQ(reply.status, 400u);
  EXPECT_NE(Json(reply.body)["error"].as<std::string>().find("match"), std::string::npos);
  EXPECT_EQ(Get("/v1/series?match=%zz").status, 400u);
}

TEST_F(HttpServerTest, SeriesDetailTakesTheRestOfThePathPercentDecoded) {
  StartServer();
  ASSERT_EQ(Post("/v1/readings", kReadings).status, 200u);
  for (const char* target : {"/v1/series/coldstore/freezer-1/temp_c",
                             "/v1/series/coldstore%2Ffreezer-1%2Ftemp_c",
                             "/v1/series/coldstore/freezer%2D1/temp%5Fc"}) {
    const Reply reply = Get(target);
    ASSERT_EQ(reply.status, 200u) << target;
    const YAML::Node json = Json(reply.body);
    EXPECT_EQ(json["name"].as<std::string>(), "coldstore/freezer-1/temp_c");
    EXPECT_EQ(json["kind"].as<std::string>(), "gauge");
    EXPECT_DOUBLE_EQ(json["forecast"].as<double>(), -18.75);
    EXPECT_DOUBLE_EQ(json["band_low"].as<double>(), -19.25);
    EXPECT_DOUBLE_EQ(json["sigma"].as<double>(), 0.25);
    ASSERT_EQ(json["detectors"].size(), 2u);
    EXPECT_EQ(json["detectors"][1]["name"].as<std::string>(), "page-hinkley");
    EXPECT_DOUBLE_EQ(json["detectors"][0]["threshold"].as<double>(), 5.0);
    EXPECT_DOUBLE_EQ(json["run_length"]["most_likely"].as<double>(), 2.0);
    EXPECT_DOUBLE_EQ(json["calibration"]["autocorrelation"].as<double>(), 0.125);
    EXPECT_DOUBLE_EQ(json["calibration"]["drift_ratio"].as<double>(), 2.5);
    EXPECT_EQ(json["calibration"]["level_chart"].as<std::string>(), "count");
    EXPECT_DOUBLE_EQ(json["calibration"]["adapted_threshold"].as<double>(), 0.0);
    ASSERT_EQ(json["recent_points"].size(), 2u);
    EXPECT_EQ(json["recent_points"][0]["time"].as<std::string>(), "2026-03-01T12:00:00Z");
    EXPECT_EQ(json["recent_alerts"].size(), 0u);
  }
}

TEST_F(HttpServerTest, SeriesNameWithSpacesAndUtf8IsFound) {
  StartServer();
  ASSERT_EQ(Post("/v1/readings", "2026-03-01T12:00:00Z,k\xC3\xBChlhaus 2/temp,3\n").status, 200u);
  const Reply reply = Get("/v1/series/k%C3%BChlhaus%202/temp");
  ASSERT_EQ(reply.status, 200u);
  EXPECT_EQ(Json(reply.body)["name"].as<std::string>(), "k\xC3\xBChlhaus 2/temp");
  // In a path '+' is itself, not a space.
  EXPECT_EQ(Get("/v1/series/k%C3%BChlhaus+2/temp").status, 404u);
}

TEST_F(HttpServerTest, UnknownSeriesIs404AndBadEncodingIs400) {
  StartServer();
  Reply reply = Get("/v1/series/coldstore/freezer-9/temp_c");
  EXPECT_EQ(reply.status, 404u);
  EXPECT_EQ(Json(reply.body)["error"].as<std::string>(),
            "no series named coldstore/freezer-9/temp_c");
  EXPECT_EQ(Get("/v1/series/").status, 404u);
  EXPECT_EQ(Get("/v1/series/coldstore%2").status, 400u);
}

Alert MakeAlert(std::string series, std::string_view detected_at, AlertKind kind) {
  Alert alert;
  alert.id = "a-" + std::string(detected_at);
  alert.series = std::move(series);
  alert.kind = kind;
  alert.direction = Direction::kUp;
  alert.detected_at = *ParseTime(detected_at);
  alert.change_at = alert.detected_at - 10 * kMicrosPerMinute;
  alert.detectors = {"cusum"};
  return alert;
}

TEST_F(HttpServerTest, AlertsSinceFiltersByDetectionTime) {
  StartServer();
  view_->AddAlert(MakeAlert("coldstore/freezer-1/temp_c", "2026-03-19T14:02:00Z",
                            AlertKind::kLevel));
  view_->AddAlert(MakeAlert("coldstore/compressor-2/power_kw", "2026-03-20T08:00:00Z",
                            AlertKind::kVariance));
  YAML::Node json = Json(Get("/v1/alerts").body);
  EXPECT_EQ(json["count"].as<int>(), 2);
  json = Json(Get("/v1/alerts?since=2026-03-20T00:00:00Z").body);
  ASSERT_EQ(json["alerts"].size(), 1u);
  EXPECT_EQ(json["alerts"][0]["series"].as<std::string>(), "coldstore/compressor-2/power_kw");
  EXPECT_EQ(json["alerts"][0]["kind"].as<std::string>(), "variance");
  EXPECT_EQ(json["alerts"][0]["change_at"].as<std::string>(), "2026-03-20T07:50:00Z");
  // Offsets (the '+' percent-encoded) and epoch seconds name the same instant.
  EXPECT_EQ(Json(Get("/v1/alerts?since=2026-03-20T01:00:00%2B01:00").body)["count"].as<int>(), 1);
  EXPECT_EQ(Json(Get("/v1/alerts?since=1773964800").body)["count"].as<int>(), 1);
  EXPECT_EQ(Json(Get("/v1/alerts?since=2026-03-21T00:00:00Z").body)["count"].as<int>(), 0);
}

TEST_F(HttpServerTest, BadSinceIs400) {
  StartServer();
  const Reply reply = Get("/v1/alerts?since=yesterday");
  EXPECT_EQ(reply.status, 400u);
  EXPECT_NE(Json(reply.body)["error"].as<std::string>().find("RFC 3339"), std::string::npos);
}

TEST_F(HttpServerTest, SeriesDetailListsItsRecentAlerts) {
  StartServer();
  ASSERT_EQ(Post("/v1/readings", kReadings).status, 200u);
  view_->AddAlert(MakeAlert("coldstore/freezer-1/temp_c", "2026-03-19T14:02:00Z",
                            AlertKind::kLevel));
  const YAML::Node json = Json(Get("/v1/series/coldstore/freezer-1/temp_c").body);
  ASSERT_EQ(json["recent_alerts"].size(), 1u);
  EXPECT_EQ(json["recent_alerts"][0]["detected_at"].as<std::string>(), "2026-03-19T14:02:00Z");
}

TEST_F(HttpServerTest, MetricsIsPrometheusTextWithTheReadingsCounter) {
  StartServer();
  ASSERT_EQ(Post("/v1/readings", kReadings).status, 200u);
  const Reply reply = Get("/metrics");
  EXPECT_EQ(reply.status, 200u);
  EXPECT_EQ(reply.content_type, "text/plain; version=0.0.4; charset=utf-8");
  EXPECT_NE(reply.body.find("\nplumbline_readings_accepted_total 4\n"), std::string::npos);
  EXPECT_NE(reply.body.find("\nplumbline_readings_rejected_total{reason=\"bad_value\"} 1\n"),
            std::string::npos);
  EXPECT_NE(reply.body.find("\nplumbline_ready 1\n"), std::string::npos);
  EXPECT_NE(reply.body.find("plumbline_http_requests_total{code=\"200\",route=\"readings\"} 1\n"),
            std::string::npos);
}

TEST_F(HttpServerTest, MetricsShowDetectorGaugesOfAdmittedSeriesAsOfTheScrape) {
  StartServer();
  ASSERT_EQ(Post("/v1/readings", kReadings).status, 200u);
  const std::string text = Get("/metrics").body;
  EXPECT_NE(text.find("\nplumbline_detector_statistic{detector=\"cusum\","
                      "series=\"coldstore/freezer-1/temp_c\"} 1.5\n"),
            std::string::npos);
  EXPECT_NE(text.find("\nplumbline_detector_threshold{detector=\"page-hinkley\","
                      "series=\"coldstore/dock/door_openings\"} 7\n"),
            std::string::npos);
  EXPECT_NE(text.find("\nplumbline_detector_series 3\n"), std::string::npos);
  EXPECT_NE(text.find("\nplumbline_series_calibration{figure=\"drift_ratio\","
                      "series=\"coldstore/dock/door_openings\"} 2.5\n"),
            std::string::npos);
  EXPECT_NE(text.find("\nplumbline_series_calibration{figure=\"tail_share\","
                      "series=\"coldstore/freezer-1/temp_c\"} 0.0625\n"),
            std::string::npos);
}

TEST_F(HttpServerTest, MetricsShowNotReady) {
  StartServer();
  view_->SetReady(false, "restoring state");
  EXPECT_NE(Get("/metrics").body.find("\nplumbline_ready 0\n"), std::string::npos);
}

// ---- protocol ----

TEST_F(HttpServerTest, UnknownPathIs404) {
  StartServer();
  const Reply reply = Get("/v2/series");
  EXPECT_EQ(reply.status, 404u);
  EXPECT_EQ(Json(reply.body)["error"].as<std::string>(), "no such path");
}

TEST_F(HttpServerTest, WrongMethodIs405WithAllow) {
  StartServer();
  Client client(port_);
  Reply reply = client.Send(http::verb::get, "/v1/readings");
  EXPECT_EQ(reply.status, 405u);
  EXPECT_EQ(reply.allow, "POST");
  reply = client.Send(http::verb::delete_, "/v1/series/coldstore/freezer-1/temp_c");
  EXPECT_EQ(reply.status, 405u);
  EXPECT_EQ(reply.allow, "GET, HEAD");
  reply = client.Send(http::verb::post, "/metrics", "x");
  EXPECT_EQ(reply.status, 405u);
  EXPECT_TRUE(reply.keep_alive);  // a refused request does not end the connection
  EXPECT_EQ(client.Send(http::verb::get, "/healthz").status, 200u);
}

TEST_F(HttpServerTest, HeadGivesTheLengthWithoutTheBody) {
  StartServer();
  Client client(port_);
  const Reply reply = client.Send(http::verb::head, "/healthz");
  EXPECT_EQ(reply.status, 200u);
  EXPECT_EQ(reply.content_length, "3");
  EXPECT_EQ(reply.body, "");
  EXPECT_EQ(client.Send(http::verb::get, "/healthz").body, "ok\n");  // stream still in step
}

TEST_F(HttpServerTest, KeepAliveServesManyRequestsOnOneConnection) {
  StartServer();
  Client client(port_);
  for (int i = 0; i < 50; ++i) {
    const Reply reply =
        client.Send(http::verb::post, "/v1/readings",
                    "2026-03-01T12:" + std::string(i < 10 ? "0" : "") + std::to_string(i) +
                        ":00Z,coldstore/freezer-1/temp_c,-18\n");
    ASSERT_EQ(reply.status, 200u);
    ASSERT_TRUE(reply.keep_alive);
  }
  EXPECT_EQ(view_->total_accepted(), 50u);
  EXPECT_EQ(server_->open_connections(), 1u);
}

TEST_F(HttpServerTest, ConnectionCloseIsHonoured) {
  StartServer();
  Client client(port_);
  const Reply reply = client.Send(http::verb::get, "/healthz", "",
                                  {{http::field::connection, "close"}});
  EXPECT_EQ(reply.status, 200u);
  EXPECT_FALSE(reply.keep_alive);
  EXPECT_TRUE(client.ReadsEndOfStream());
}

TEST_F(HttpServerTest, MalformedRequestIs400AndCloses) {
  StartServer();
  Client client(port_);
  client.WriteRaw("this is not http\r\n\r\n");
  EXPECT_EQ(client.Read().status, 400u);
  EXPECT_TRUE(client.ReadsEndOfStream());
}

TEST_F(HttpServerTest, OversizedHeaderIs431) {
  StartServer(HttpServerOptions{.max_header_bytes = 1024});
  Client client(port_);
  client.WriteRaw("GET /healthz HTTP/1.1\r\nHost: x\r\nX-Filler: " + std::string(2000, 'a') +
                  "\r\n\r\n");
  EXPECT_EQ(client.Read().status, 431u);
}

TEST_F(HttpServerTest, IdleConnectionIsClosedAfterTheReadTimeout) {
  StartServer(HttpServerOptions{.read_timeout = std::chrono::milliseconds(200)});
  Client client(port_);
  EXPECT_EQ(client.Send(http::verb::get, "/healthz").status, 200u);
  EXPECT_TRUE(client.ReadsEndOfStream());  // blocks until the server gives up on us
}

TEST_F(HttpServerTest, PartialRequestIsDroppedAtTheReadTimeout) {
  StartServer(HttpServerOptions{.read_timeout = std::chrono::milliseconds(200)});
  Client client(port_);
  client.WriteRaw("POST /v1/readings HTTP/1.1\r\nHost: x\r\nContent-Length: 100\r\n\r\nabc");
  EXPECT_TRUE(client.ReadsEndOfStream());
  EXPECT_EQ(view_->total_accepted(), 0u);
}

TEST_F(HttpServerTest, QueriesAnswerWhileEveryIngestThreadWaitsOnBackpressure) {
  StartServer();  // two ingest threads
  view_->CloseGate();
  std::vector<std::future<Reply>> pending;
  for (int i = 0; i < 3; ++i) {  // one more than there are ingest threads
    pending.push_back(std::async(std::launch::async, [this] {
      return Post("/v1/readings", "2026-03-01T12:00:00Z,coldstore/freezer-1/temp_c,-18.5\n");
    }));
  }
  view_->AwaitWaiting(2);
  EXPECT_EQ(Get("/healthz").status, 200u);
  EXPECT_EQ(Get("/metrics").status, 200u);
  EXPECT_EQ(Get("/v1/series").status, 200u);
  EXPECT_EQ(Get("/readyz").status, 200u);
  view_->OpenGate();
  for (auto& reply : pending) EXPECT_EQ(reply.get().status, 200u);
}

TEST_F(HttpServerTest, HealthzAnswersEvenWhenEveryQueryThreadIsBusy) {
  HttpServerOptions options;
  options.query_threads = 1;
  StartServer(options);
  view_->CloseQueryGate();
  auto pending = std::async(std::launch::async, [this] { return Get("/v1/series"); });
  view_->AwaitQueryWaiting(1);
  EXPECT_EQ(Get("/healthz").status, 200u);
  Client client(port_);
  EXPECT_EQ(client.Send(http::verb::head, "/healthz").status, 200u);
  view_->OpenQueryGate();
  EXPECT_EQ(pending.get().status, 200u);
}

TEST_F(HttpServerTest, ConcurrentClientsAreAllAnswered) {
  StartServer();
  constexpr int kClients = 16;
  constexpr int kRequests = 40;
  std::atomic<int> ok{0};
  std::vector<std::thread> clients;
  for (int c = 0; c < kClients; ++c) {
    clients.emplace_back([&, c] {
      Client client(port_);
      for (int i = 0; i < kRequests; ++i) {
        const std::string series = "coldstore/client-" + std::to_string(c) + "/temp_c";
        Reply reply = i % 2 == 0 ? client.Send(http::verb::post, "/v1/readings",
                                               "1772366400,"+ series + ",1\n")
                                 : client.Send(http::verb::get, "/v1/series/" + series);
        ok += reply.status == 200;
      }
    });
  }
  for (auto& t : clients) t.join();
  EXPECT_EQ(ok.load(), kClients * kRequests);
  EXPECT_EQ(view_->total_accepted(), static_cast<std::size_t>(kClients * kRequests / 2));
}

TEST_F(HttpServerTest, AcceptingPausesAtTheConnectionLimit) {
  StartServer(HttpServerOptions{.max_connections = 2});
  auto first = std::make_unique<Client>(port_);
  Client second(port_);
  EXPECT_EQ(first->Send(http::verb::get, "/healthz").status, 200u);
  EXPECT_EQ(second.Send(http::verb::get, "/healthz").status, 200u);
  // The third connection completes in the kernel's backlog but is not accepted:
  // its request is answered only once another connection closes.
  Client third(port_);
  third.WriteRaw("GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n");
  auto answer = std::async(std::launch::async, [&third] { return third.Read().status; });
  EXPECT_EQ(answer.wait_for(std::chrono::milliseconds(300)), std::future_status::timeout);
  EXPECT_EQ(server_->open_connections(), 2u);
  first.reset();
  EXPECT_EQ(answer.get(), 200u);
  EXPECT_EQ(server_->open_connections(), 2u);
}

TEST_F(HttpServerTest, StopClosesIdleConnectionsAndFinishesRequestsInFlight) {
  StartServer();
  Client idle(port_);
  EXPECT_EQ(idle.Send(http::verb::get, "/healthz").status, 200u);
  view_->CloseGate();
  Client busy(port_);
  busy.WriteRaw(
      "POST /v1/readings HTTP/1.1\r\nHost: x\r\nContent-Length: 54\r\n\r\n"
      "2026-03-01T12:00:00Z,coldstore/freezer-1/temp_c,-18.5\n");
  view_->AwaitWaiting(1);
  std::atomic<bool> stopped{false};
  server_->Stop(std::chrono::seconds(10), [&stopped] { stopped = true; });
  EXPECT_TRUE(idle.ReadsEndOfStream());  // idle: closed at once
  EXPECT_FALSE(stopped.load());          // busy: still answering
  view_->OpenGate();
  const Reply reply = busy.Read();
  EXPECT_EQ(reply.status, 200u);
  EXPECT_FALSE(reply.keep_alive);  // the last answer says Connection: close
  EXPECT_TRUE(busy.ReadsEndOfStream());
  EXPECT_TRUE(server_->WaitStopped(std::chrono::seconds(10)));
  EXPECT_TRUE(stopped.load());
  // Nothing listens any more.
  net::io_context io;
  tcp::socket socket(io);
  beast::error_code ec;
  socket.connect(tcp::endpoint(net::ip::make_address("127.0.0.1"), port_), ec);
  EXPECT_TRUE(ec);
}

TEST_F(HttpServerTest, StopClosesRequestsStillBusyAfterTheGracePeriod) {
  StartServer();
  view_->CloseGate();
  Client busy(port_);
  busy.WriteRaw(
      "POST /v1/readings HTTP/1.1\r\nHost: x\r\nContent-Length: 54\r\n\r\n"
      "2026-03-01T12:00:00Z,coldstore/freezer-1/temp_c,-18.5\n");
  view_->AwaitWaiting(1);
  server_->Stop(std::chrono::milliseconds(100));
  EXPECT_TRUE(busy.ReadsEndOfStream());
  EXPECT_TRUE(server_->WaitStopped(std::chrono::seconds(10)));
  {
    std::lock_guard<std::mutex> lock(log_mutex_);
    ASSERT_EQ(logged_.size(), 1u);
    EXPECT_NE(logged_[0].find("still busy after the grace period"), std::string::npos);
    logged_.clear();
  }
  view_->OpenGate();  // the route finishes; its answer has nowhere to go
}

TEST_F(HttpServerTest, StartFailsWhenTheAddressIsTaken) {
  StartServer();
  HttpServer second(io_, tcp::endpoint(net::ip::make_address("127.0.0.1"), port_), *view_,
                    &*metrics_);
  const Status status = second.Start();
  EXPECT_FALSE(status.ok());
  EXPECT_NE(status.message().find("bind"), std::string::npos) << status.message();
  second.Stop(std::chrono::milliseconds(0));
}

TEST_F(HttpServerTest, FullIngestBudgetIs503WithRetryAfterAndQueriesStillAnswer) {
  StartServer();
  view_->SetOverloaded(true);
  const Reply refused = Post("/v1/readings", kReadings);
  EXPECT_EQ(refused.status, 503u);
  EXPECT_FALSE(refused.retry_after.empty());
  EXPECT_NE(refused.body.find("overloaded"), std::string::npos) << refused.body;
  EXPECT_EQ(Get("/v1/series").status, 200u);
  view_->SetOverloaded(false);
  EXPECT_EQ(Post("/v1/readings", kReadings).status, 200u);
  EXPECT_NE(metrics_->Serialize().find(
                "plumbline_http_requests_total{code=\"503\",route=\"readings\"} 1"),
            std::string::npos);
}

TEST_F(HttpServerTest, WithATokenRequestsWithoutTheRightBearerAre401) {
  HttpServerOptions options;
  options.token = "harbourside-7f3a";
  StartServer(options);
  const Reply none = Get("/v1/series");
  EXPECT_EQ(none.status, 401u);
  EXPECT_EQ(none.www_authenticate, "Bearer");
  EXPECT_EQ(none.body.find("harbourside-7f3a"), std::string::npos);
  EXPECT_EQ(Client(port_)
                .Send(http::verb::post, "/v1/readings", kReadings,
                      {{http::field::authorization, "Bearer harbourside-7f3b"}})
                .status,
            401u);
  EXPECT_EQ(Get("/metrics").status, 401u);
  EXPECT_EQ(Get("/healthz").status, 200u);  // liveness asks nothing, needs nothing
  const Reply good = Client(port_).Send(http::verb::post, "/v1/readings", kReadings,
                                        {{http::field::authorization, "bearer harbourside-7f3a"}});
  EXPECT_EQ(good.status, 200u);
  EXPECT_EQ(Json(good.body)["accepted"].as<int>(), 4);
}

TEST(AccessTest, TokensCompareWholeAndBearerSchemeIsCaseInsensitive) {
  EXPECT_TRUE(TokenMatches("s3cret", "s3cret"));
  EXPECT_FALSE(TokenMatches("s3cre", "s3cret"));
  EXPECT_FALSE(TokenMatches("s3cretx", "s3cret"));
  EXPECT_FALSE(TokenMatches("t3cret", "s3cret"));
  EXPECT_FALSE(TokenMatches("", ""));  // an empty expected token matches nothing
  EXPECT_TRUE(BearerMatches("Bearer s3cret", "s3cret"));
  EXPECT_TRUE(BearerMatches("BEARER  s3cret ", "s3cret"));
  EXPECT_FALSE(BearerMatches("Basic s3cret", "s3cret"));
  EXPECT_FALSE(BearerMatches("s3cret", "s3cret"));
}

TEST(AccessTest, TokenComesFromAFileOrTheEnvironmentAndIsNeverEchoed) {
  const std::string path = ::testing::TempDir() + "/plumbline_token_test";
  {
    std::ofstream file(path);
    file << "harbourside-7f3a\r\nsecond line ignored\n";
  }
  AccessOptions options;
  options.token_file = path;
  auto token = LoadAccessToken(options);
  ASSERT_TRUE(token.ok()) << token.status().message();
  EXPECT_EQ(*token, "harbourside-7f3a");
  {
    std::ofstream file(path);
    file << "two words\n";
  }
  token = LoadAccessToken(options);
  ASSERT_FALSE(token.ok());
  EXPECT_EQ(token.status().message().find("two words"), std::string::npos);
  options.token_file.clear();
  options.token_env = "PLUMBLINE_TOKEN_TEST_VARIABLE";
  ::setenv("PLUMBLINE_TOKEN_TEST_VARIABLE", "from-env", 1);
  token = LoadAccessToken(options);
  ASSERT_TRUE(token.ok());
  EXPECT_EQ(*token, "from-env");
  ::unsetenv("PLUMBLINE_TOKEN_TEST_VARIABLE");
  EXPECT_FALSE(LoadAccessToken(options).ok());
  EXPECT_EQ(*LoadAccessToken(AccessOptions{}), "");  // off
  std::remove(path.c_str());
}

TEST(HttpServerOptionsTest, Rules) {
  std::string why;
  EXPECT_TRUE(HttpServerOptions{}.IsValid(&why));
  EXPECT_FALSE(HttpServerOptions{.max_body_bytes = 10}.IsValid(&why));
  EXPECT_NE(why.find("max_body_bytes"), std::string::npos);
  EXPECT_FALSE(HttpServerOptions{.max_connections = 0}.IsValid(&why));
  EXPECT_FALSE(HttpServerOptions{.ingest_threads = 0}.IsValid(&why));
  EXPECT_FALSE(HttpServerOptions{.query_threads = 65}.IsValid(&why));
  EXPECT_FALSE(HttpServerOptions{.read_timeout = std::chrono::milliseconds(0)}.IsValid(&why));
}

// ---- helpers (no sockets) ----

TEST(PercentDecodeTest, DecodesEscapesAndRefusesBrokenOnes) {
  EXPECT_EQ(PercentDecode("coldstore%2Ffreezer-1%2ftemp_c", false), "coldstore/freezer-1/temp_c");
  EXPECT_EQ(PercentDecode("a+b", false), "a+b");
  EXPECT_EQ(PercentDecode("a+b", true), "a b");
  EXPECT_EQ(PercentDecode("%41%42%43", false), "ABC");
  EXPECT_EQ(PercentDecode("", false), "");
  EXPECT_EQ(PercentDecode("100%", false), std::nullopt);
  EXPECT_EQ(PercentDecode("%4", false), std::nullopt);
  EXPECT_EQ(PercentDecode("%g1", false), std::nullopt);
  EXPECT_EQ(PercentDecode("%00", false), std::string(1, '\0'));
}

TEST(QueryParameterTest, FindsTheFirstPairByDecodedName) {
  EXPECT_EQ(QueryParameter("match=a%2F*&limit=5", "match"), "a/*");
  EXPECT_EQ(QueryParameter("match=a%2F*&limit=5", "limit"), "5");
  EXPECT_EQ(QueryParameter("limit=5&limit=6", "limit"), "5");
  EXPECT_EQ(QueryParameter("flag&x=1", "flag"), "");
  EXPECT_EQ(QueryParameter("x=1", "match"), std::nullopt);
  EXPECT_EQ(QueryParameter("", "match"), std::nullopt);
  EXPECT_EQ(QueryParameter("since=2026-03-01T12:00:00%2B01:00", "since"),
            "2026-03-01T12:00:00+01:00");
  bool malformed = false;
  EXPECT_EQ(QueryParameter("match=%zz", "match", &malformed), std::nullopt);
  EXPECT_TRUE(malformed);
  EXPECT_EQ(QueryParameter("other=%zz", "match", &malformed), std::nullopt);
  EXPECT_FALSE(malformed);
}

TEST(JsonTest, StringsAreEscapedAndAlwaysValidUtf8) {
  std::string out;
  AppendJsonString("a\"b\\c\nd\x01\x7f", &out);
  EXPECT_EQ(out, "\"a\\\"b\\\\c\\nd\\u0001\\u007f\"");
  out.clear();
  AppendJsonString("k\xC3\xBChl \xE2\x86\x91", &out);  // valid UTF-8 passes unchanged
  EXPECT_EQ(out, "\"k\xC3\xBChl \xE2\x86\x91\"");
  out.clear();
  // A lone continuation byte, a truncated sequence, an overlong '/', a surrogate.
  AppendJsonString("a\x80z\xE2\x86 \xC0\xAF \xED\xA0\x80", &out);
  EXPECT_EQ(out, "\"a\xEF\xBF\xBDz\xEF\xBF\xBD\xEF\xBF\xBD \xEF\xBF\xBD\xEF\xBF\xBD "
                 "\xEF\xBF\xBD\xEF\xBF\xBD\xEF\xBF\xBD\"");
}

TEST(JsonTest, NumbersRoundTripAndNonFiniteIsNull) {
  std::string out;
  AppendJsonNumber(-18.25, &out);
  out += ' ';
  AppendJsonNumber(0.1, &out);
  out += ' ';
  AppendJsonNumber(1e300, &out);
  out += ' ';
  AppendJsonNumber(std::numeric_limits<double>::quiet_NaN(), &out);
  out += ' ';
  AppendJsonNumber(-std::numeric_limits<double>::infinity(), &out);
  EXPECT_EQ(out, "-18.25 0.1 1e+300 null null");
}

TEST(JsonTest, ReceiptListsFirstErrors) {
  IngestReceipt receipt;
  receipt.accepted = 3;
  receipt.rejected = 1;
  receipt.first_rejections.push_back({2, "bad_time"});
  EXPECT_EQ(IngestReceiptToJson(receipt),
            "{\"accepted\":3,\"rejected\":1,\"errors\":[{\"line\":2,\"reason\":\"bad_time\"}]}");
}

TEST(JsonTest, SeriesWithoutReadingsHasNullLastReading) {
  SeriesSummary summary;
  summary.name = "coldstore/main/energy_kwh";
  summary.kind = "meter";
  EXPECT_EQ(SeriesSummaryToJson(summary),
            "{\"name\":\"coldstore/main/energy_kwh\",\"kind\":\"meter\",\"readings\":0,"
            "\"last_time\":null,\"last_value\":null,\"armed\":false,\"silent\":false,"
            "\"state\":\"settling\",\"alert_count\":0,\"last_change_at\":null}");
}

}  // namespace
}  // namespace plumbline
