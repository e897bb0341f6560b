// HttpServer: HTTP/1.1 on Boost.Beast for Plumbline's API (routes in
// http_api.h) and `GET /metrics`.
//
// One session per connection, kept alive by shared_from_this in its pending
// handlers, on its own strand, with keep-alive. Every socket has a read
// deadline (a whole request, or the idle wait between requests) and a write
// deadline (a client too slow to send its request in time is counted in
// plumbline_connections_dropped_total{input="http",reason="read_timeout"});
// request headers and bodies have size limits (431 and 413). At most
// max_connections are open: at the limit the server stops accepting and
// resumes when one closes (waiting clients queue in the kernel's backlog).
// Routes run on small pools of handler threads, never on the I/O threads,
// since ServiceView calls may block (ingest backpressure, shard round trips):
// ingest has a pool of its own, so a blocked ingest never stalls the queries
// or /metrics; /healthz is answered on the I/O thread (it asks nothing).
//
// With options.tls every connection is TLS: the handshake comes first, within
// the read deadline, and a client that fails it is closed and counted.
//
// Expected ends of a connection (end of stream, reset by peer, idle timeout,
// shutdown) are not logged as errors.
//
// Staged shutdown: Stop() closes the listening socket, closes idle
// connections, lets requests in flight finish (their answers carry
// `Connection: close`), and after `grace` closes whatever is left.
//
// Thread-safety: Start, Stop, WaitStopped and local_endpoint may be called from
// any thread. Destroy the server only after Stop and once the io_context runs
// no more of its handlers (run() returned), and before the ServiceView and
// ServiceMetrics it was given.
#pragma once

#include <utility>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/asio/ssl/context.hpp>
#include <chrono>
#include <cstddef>
#include <functional>
#include <memory>
#include <string>
#include <string_view>

#include "daemon/http_api.h"
#include "daemon/metrics.h"
#include "daemon/service_view.h"
#include "detectors/status.h"

namespace plumbline {

struct HttpServerOptions {
  std::size_t max_body_bytes = 16u << 20;  // a larger request body is answered 413
  std::size_t max_header_bytes = 16u << 10;  // larger request line + headers: 431
  // Time allowed to receive one whole request, and to wait idle between two
  // requests on a kept-alive connection.
  std::chrono::milliseconds read_timeout{30'000};
  std::chrono::milliseconds write_timeout{30'000};  // to send one response
  std::size_t max_connections = 256;  // accepting pauses at this many open
  // Threads that run routes (ServiceView calls), in two pools so that ingest
  // waiting on backpressure never holds up the queries: POST /v1/readings runs
  // on `ingest_threads`, every other route on `query_threads`.
  std::size_t ingest_threads = 2;
  std::size_t query_threads = 2;
  HttpApiOptions api{};
  // Non-empty: every request but GET /healthz must carry `Authorization:
  // Bearer <token>` (access.h); others are answered 401 as soon as their
  // header is read, before any body. Never logged.
  std::string token{};
  // Set: every connection is TLS (daemon/tls.h); a client that fails the
  // handshake is closed and counted (reason="tls_handshake").
  std::shared_ptr<boost::asio::ssl::context> tls{};

  // Rules: max_body_bytes in [1024, 1 GiB]; max_header_bytes in [1024, 1 MiB];
  // timeouts positive; max_connections in [1, 100000]; ingest_threads and
  // query_threads in [1, 64]; api valid.
  bool IsValid(std::string* why) const;
};

enum class HttpLogLevel { kInfo, kWarning, kError };
std::string_view ToString(HttpLogLevel level);
// Where the server reports what an operator should see (start, stop,
// unexpected socket errors). Called from I/O threads; must be thread-safe.
using HttpLogger = std::function<void(HttpLogLevel level, std::string_view message)>;

class HttpServer {
 public:
  // `view` and `metrics` (may be null: no /metrics, no HTTP metrics) must
  // outlive the server. Nothing is opened until Start.
  HttpServer(boost::asio::io_context& io, boost::asio::ip::tcp::endpoint endpoint,
             ServiceView& view, ServiceMetrics* metrics, HttpServerOptions options = {},
             HttpLogger logger = nullptr);
  ~HttpServer();
  HttpServer(const HttpServer&) = delete;
  HttpServer& operator=(const HttpServer&) = delete;

  // Opens, binds and listens, then accepts on the io_context (which the caller
  // runs). Unavailable (with the address and the system's reason) when the
  // address cannot be bound; InvalidArgument for invalid options.
  Status Start();

  // The bound address (the real port when the endpoint asked for port 0).
  boost::asio::ip::tcp::endpoint local_endpoint() const;

  // Staged shutdown (see the header comment). Returns at once; `on_stopped`
  // (optional) runs on an I/O thread once no connection is open and nothing
  // is accepted any more. Later calls do nothing.
  void Stop(std::chrono::milliseconds grace,
            std::function<void()> on_stopped = nullptr);
  // Blocks until stopped or `timeout` passes; true when stopped. Needs the
  // io_context running on another thread.
  bool WaitStopped(std::chrono::milliseconds timeout);

  // Connections open now (for tests and logs).
  std::size_t open_connections() const;

  struct State;  // shared with the sessions (http_server.cc)

 private:
  std::shared_ptr<State> state_;
};

}  // namespace plumbline
