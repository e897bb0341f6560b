// api_test_server: the HTTP API and /metrics on a FakeServiceView, without the
// engine. For the Prometheus end-to-end check and for load measurements of the
// HTTP layer alone (wrk); not part of the product.
//
// Usage: api_test_server [--port N] [--series N] [--series-limit N] [--io-threads N]
//   --port N          listen on 127.0.0.1:N (default 0: any free port)
//   --series N        start with N series (coldstore/bay-<i>/temp_c), one reading
//                     each, with three detector gauges each (default 0)
//   --series-limit N  the metrics' cardinality guard (default 100)
//   --io-threads N    threads running the io_context (default 1)
// Prints "listening 127.0.0.1:PORT" on stdout once it accepts; stops (staged)
// on SIGINT or SIGTERM and exits 0.
#include <utility>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/asio/signal_set.hpp>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <string>
#include <thread>
#include <vector>

#include "daemon/http_server.h"
#include "daemon/metrics.h"
#include "tests/support/fake_service_view.h"

int main(int argc, char** argv) {
  using namespace plumbline;
  int port = 0;
  long series = 0;
  long series_limit = 100;
  int io_threads = 1;
  for (int i = 1; i < argc; ++i) {
    const bool has_value = i + 1 < argc;
    if (std::strcmp(argv[i], "--port") == 0 && has_value) {
      port = std::atoi(argv[++i]);
    } else if (std::strcmp(argv[i], "--series") == 0 && has_value) {
      series = std::atol(argv[++i]);
    } else if (std::strcmp(argv[i], "--series-limit") == 0 && has_value) {
      series_limit = std::atol(argv[++i]);
    } else if (std::strcmp(argv[i], "--io-threads") == 0 && has_value) {
      io_threads = std::atoi(argv[++i]);
    } else {
      std::fprintf(stderr,
                   "usage: api_test_server [--port N] [--series N] [--series-limit N] "
                   "[--io-threads N]\n");
      return 2;
    }
  }

  ServiceMetrics metrics(ServiceMetricsOptions{
      .shards = 1, .max_detector_series = static_cast<std::size_t>(series_limit)});
  testing::FakeServiceView view(&metrics);
  std::string body;
  for (long i = 0; i < series; ++i) {
    const std::string name = "coldstore/bay-" + std::to_string(i) + "/temp_c";
    body += "2026-03-01T12:00:00Z," + name + ",-18.5\n";
    if (SeriesGauges* gauges = metrics.AdmitSeries(name)) {
      gauges->Set("cusum", 0.5, 5.0);
      gauges->Set("page-hinkley", 1.5, 7.0);
      gauges->Set("bocpd", 0.01, 0.5);
    }
  }
  if (!body.empty()) view.IngestLines(body);

  boost::asio::io_context io;
  HttpServer server(io, {boost::asio::ip::make_address("127.0.0.1"), static_cast<unsigned short>(port)},
                    view, &metrics, HttpServerOptions{},
                    [](HttpLogLevel level, std::string_view message) {
                      std::fprintf(stderr, "%s: %.*s\n", std::string(ToString(level)).c_str(),
                                   static_cast<int>(message.size()), message.data());
                    });
  if (Status status = server.Start(); !status.ok()) {
    std::fprintf(stderr, "api_test_server: %s\n", status.ToString().c_str());
    return 1;
  }
  std::printf("listening 127.0.0.1:%u\n", server.local_endpoint().port());
  std::fflush(stdout);

  boost::asio::signal_set signals(io, SIGINT, SIGTERM);
  signals.async_wait([&](const boost::system::error_code& ec, int) {
    if (!ec) server.Stop(std::chrono::seconds(5));
  });
  std::vector<std::thread> threads;
  for (int i = 1; i < io_threads; ++i) threads.emplace_back([&io] { io.run(); });
  // run() returns once the server has stopped and the signal wait is done.
  io.run();
  for (auto& t : threads) t.join();
  return 0;
}
