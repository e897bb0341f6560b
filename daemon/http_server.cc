#include "daemon/http_server.h"

#include <utility>
#include <array>
#include <atomic>
#include <boost/asio/bind_executor.hpp>
#include <boost/asio/post.hpp>
#include <boost/asio/steady_timer.hpp>
#include <boost/asio/strand.hpp>
#include <boost/asio/thread_pool.hpp>
#include <boost/beast/core.hpp>
#include <boost/beast/http.hpp>
#include <boost/beast/ssl.hpp>
#include <condition_variable>
#include <exception>
#include <mutex>
#include <optional>
#include <sstream>
#include <type_traits>
#include <unordered_map>
#include <vector>

#include "daemon/access.h"
#include "plumbline_version.h"

namespace plumbline {
namespace {

namespace net = boost::asio;
namespace beast = boost::beast;
namespace http = beast::http;
using tcp = net::ip::tcp;

// After an answer that closes the connection while the client may still be
// sending (413 and other refusals mid-body), the rest of what it sends is read
// and discarded for up to this long or this many bytes before the socket is
// closed, so the client reads the answer instead of a connection reset.
constexpr std::chrono::milliseconds kLingerTime{2000};
constexpr std::size_t kLingerBytes = 64u << 20;
// Wait before accepting again after an accept error (e.g. out of descriptors),
// so that the accept loop does not spin.
constexpr std::chrono::milliseconds kAcceptRetryDelay{100};

constexpr char kServerHeader[] = "plumbline/" PLUMBLINE_VERSION;

std::string_view Std(beast::string_view text) { return {text.data(), text.size()}; }

// Ends of a connection that are part of normal operation, not errors.
bool IsExpectedEnd(const beast::error_code& ec) {
  return ec == http::error::end_of_stream || ec == net::error::eof ||
         ec == net::error::operation_aborted || ec == net::error::connection_reset ||
         ec == net::error::broken_pipe || ec == beast::error::timeout ||
         ec == net::error::not_connected || ec == net::error::bad_descriptor;
}

std::string_view RouteOf(std::string_view target) {
  const std::string_view path = target.substr(0, target.find('?'));
  if (path == "/v1/readings") return "readings";
  return "other";
}

// What the server needs of a session whatever its stream (plain or TLS).
class SessionBase {
 public:
  virtual ~SessionBase() = default;
  virtual void Run() = 0;
  // From Stop: close now if waiting for a request (or if `force`); otherwise
  // the answer in progress is the last one.
  virtual void PostShutdown(bool force) = 0;
};

}  // namespace

std::string_view ToString(HttpLogLevel level) {
  switch (level) {
    case HttpLogLevel::kInfo: return "info";
    case HttpLogLevel::kWarning: return "warning";
    case HttpLogLevel::kError: return "error";
  }
  return "info";
}

bool HttpServerOptions::IsValid(std::string* why) const {
  const auto fail = [why](const char* rule) {
    if (why) *why = rule;
    return false;
  };
  if (max_body_bytes < 1024 || max_body_bytes > (std::size_t{1} << 30)) {
    return fail("max_body_bytes must be in [1024, 1073741824]");
  }
  if (max_header_bytes < 1024 || max_header_bytes > (std::size_t{1} << 20)) {
    return fail("max_header_bytes must be in [1024, 1048576]");
  }
  if (read_timeout.count() <= 0 || write_timeout.count() <= 0) {
    return fail("read_timeout and write_timeout must be positive");
  }
  if (max_connections < 1 || max_connections > 100000) {
    return fail("max_connections must be in [1, 100000]");
  }
  if (ingest_threads < 1 || ingest_threads > 64 || query_threads < 1 || query_threads > 64) {
    return fail("ingest_threads and query_threads must be in [1, 64]");
  }
  return api.IsValid(why);
}

// Everything the sessions share with the server. Sessions hold it by
// shared_ptr, so it outlives the HttpServer object if the io_context still
// holds (unrun) handlers when the server is destroyed; `detached` then keeps
// them away from the view, the metrics and the logger.
struct HttpServer::State : std::enable_shared_from_this<HttpServer::State> {
  State(net::io_context& io_context, tcp::endpoint endpoint, ServiceView& view,
        ServiceMetrics* service_metrics, HttpServerOptions server_options, HttpLogger log)
      : io(io_context),
        requested(std::move(endpoint)),
        api(view, service_metrics, server_options.api),
        metrics(service_metrics),
        options(std::move(server_options)),
        logger(std::move(log)),
        acceptor(net::make_strand(io_context)),
        accept_timer(acceptor.get_executor()),
        grace_timer(acceptor.get_executor()),
        ingest_workers(options.ingest_threads),
        query_workers(options.query_threads) {}

  void Log(HttpLogLevel level, const std::string& message) {
    if (logger) logger(level, message);
  }

  // ---- on the acceptor's strand ----
  void DoAccept();
  void OnAccept(beast::error_code ec, tcp::socket socket);
  void BeginStop(std::chrono::milliseconds grace);
  void Finish();

  // ---- any thread ----
  void OnSessionClosed();
  std::vector<std::shared_ptr<SessionBase>> LiveSessions();

  net::io_context& io;
  const tcp::endpoint requested;
  const HttpApi api;
  ServiceMetrics* const metrics;
  const HttpServerOptions options;
  const HttpLogger logger;
  std::atomic<bool> stopping{false};  // answers carry Connection: close once set

  // Used only on the acceptor's strand (and in Start, before accepting).
  tcp::acceptor acceptor;
  net::steady_timer accept_timer;
  net::steady_timer grace_timer;

  // Run the routes (POST /v1/readings; the others); joined by ~HttpServer.
  net::thread_pool ingest_workers;
  net::thread_pool query_workers;

  mutable std::mutex mutex;  // guards the members below
  std::condition_variable finished_cv;
  // The open connections.
  std::unordered_map<SessionBase*, std::weak_ptr<SessionBase>> sessions;
  bool started = false;     // Start succeeded
  bool accepting = false;   // an accept is pending or posted
  bool stop_requested = false;
  bool finishing = false;   // Finish has begun
  bool finished = false;    // stopped: nothing open, nothing accepted, on_stopped done
  bool detached = false;    // the HttpServer is gone
  tcp::endpoint bound;
  std::function<void()> on_stopped;
};

namespace {

// One connection: reads requests, hands them to the worker pool, writes the
// answers. Lives through shared_from_this held by its pending handlers; every
// handler runs on the session's strand (the stream's executor). `Stream` is
// beast::tcp_stream, or beast::ssl_stream over one (TLS: a handshake first,
// within the read deadline; a failed one is counted and closes the socket).
template <class Stream>
class Session : public SessionBase, public std::enable_shared_from_this<Session<Stream>> {
 public:
  using State = HttpServer::State;
  static constexpr bool kTls = !std::is_same_v<Stream, beast::tcp_stream>;

  // `stream_args`: the accepted socket (and the TLS context).
  template <class... StreamArgs>
  explicit Session(std::shared_ptr<State> state, StreamArgs&&... stream_args)
      : stream_(std::forward<StreamArgs>(stream_args)...), state_(std::move(state)) {}

  ~Session() override { Unregister(); }

  void Run() override {
    net::dispatch(stream_.get_executor(), [self = this->shared_from_this()] {
      if constexpr (kTls) {
        self->DoHandshake();
      } else {
        self->DoRead();
      }
    });
  }

  void PostShutdown(bool force) override {
    net::post(stream_.get_executor(), [self = this->shared_from_this(), force] {
      self->shutting_down_ = true;
      if (force || self->phase_ == Phase::kWaiting) self->Close();
    });
  }

 private:
  enum class Phase {
    kWaiting,   // for the first bytes of a request (idle keep-alive)
    kReading,   // a request's header has come; its body is being read
    kHandling,  // a worker runs the route
    kWriting,   // the answer is being sent
    kLingering, // draining what the client still sends before closing
    kClosed,
  };

  beast::tcp_stream& Lowest() { return beast::get_lowest_layer(stream_); }

  void DoHandshake() {
    Lowest().expires_after(state_->options.read_timeout);
    stream_.async_handshake(net::ssl::stream_base::server,
                            [self = this->shared_from_this()](beast::error_code ec) {
                              self->OnHandshake(ec);
                            });
  }

  // A client that is not speaking TLS (or cannot agree on it) is closed,
  // counted as reason="tls_handshake".
  void OnHandshake(beast::error_code ec) {
    if (ec) {
      if (ec != net::error::operation_aborted && state_->metrics != nullptr) {
        state_->metrics->CountConnectionDropped("http", "tls_handshake");
      }
      return Close();
    }
    DoRead();
  }

  void DoRead() {
    if (shutting_down_ || state_->stopping) {
      Close();
      return;
    }
    phase_ = Phase::kWaiting;
    parser_.emplace();
    parser_->header_limit(static_cast<std::uint32_t>(state_->options.max_header_bytes));
    parser_->body_limit(state_->options.max_body_bytes);
    // One deadline for the idle wait and the whole request.
    Lowest().expires_after(state_->options.read_timeout);
    http::async_read_header(
        stream_, buffer_, *parser_,
        [self = this->shared_from_this()](beast::error_code ec, std::size_t) {
          self->OnReadHeader(ec);
        });
  }

  void OnReadHeader(beast::error_code ec) {
    if (ec) return OnReadError(ec);
    phase_ = Phase::kReading;
    const auto& request = parser_->get();
    if (!state_->options.token.empty() && Std(request.target()) != "/healthz" &&
        !BearerMatches(Std(request[http::field::authorization]), state_->options.token)) {
      return RespondError(401, "missing or wrong bearer token");
    }
    if (beast::iequals(request[http::field::expect], "100-continue") && !parser_->is_done()) {
      // The client waits for our go-ahead before sending the body.
      continue_.emplace(http::status::continue_, request.version());
      http::async_write(
          stream_, *continue_,
          [self = this->shared_from_this()](beast::error_code ec, std::size_t) {
            if (ec) return self->OnWriteError(ec);
            self->DoReadBody();
          });
      return;
    }
    DoReadBody();
  }

  void DoReadBody() {
    if (parser_->is_done()) return DoHandle();
    http::async_read(
        stream_, buffer_, *parser_,
        [self = this->shared_from_this()](beast::error_code ec, std::size_t) {
          if (ec) return self->OnReadError(ec);
          self->DoHandle();
        });
  }

  // A timeout closes the socket (tcp_stream's deadline), so a slow or idle
  // client simply sees the connection end.
  void OnReadError(beast::error_code ec) {
    if (ec == http::error::body_limit) {
      return RespondError(413, "request body larger than " +
                                   std::to_string(state_->options.max_body_bytes) + " bytes");
    }
    if (ec == http::error::header_limit) {
      return RespondError(431, "request header larger than " +
                                   std::to_string(state_->options.max_header_bytes) + " bytes");
    }
    if (ec.category() == http::make_error_code(http::error::bad_target).category() &&
        ec != http::error::end_of_stream && ec != http::error::partial_message) {
      return RespondError(400, "malformed request: " + ec.message());
    }
    if (!IsExpectedEnd(ec) && ec != http::error::partial_message) {
      state_->Log(HttpLogLevel::kWarning, "http: read failed: " + ec.message());
    }
    if (ec == beast::error::timeout && state_->metrics != nullptr) {
      state_->metrics->CountConnectionDropped("http", "read_timeout");
    }
    Close();
  }

  void DoHandle() {
    phase_ = Phase::kHandling;
    http::request<http::string_body> request = parser_->release();
    keep_alive_ = request.keep_alive();
    head_ = request.method() == http::verb::head;
    version_ = request.version();
    Lowest()
        .expires_never();  // the route may wait on backpressure; the write sets its own
    const std::string_view target = Std(request.target());
    if (target == "/healthz" && request.body().empty()) {
      // Liveness asks the service nothing: answered here, whatever the pools do.
      return OnHandled(state_->api.Handle(Std(request.method_string()), target, ""));
    }
    const bool ingest = RouteOf(target) == "readings";
    net::thread_pool& pool = ingest ? state_->ingest_workers : state_->query_workers;
    net::post(pool, [self = this->shared_from_this(), request = std::move(request)] {
      ApiResponse response;
      try {
        response = self->state_->api.Handle(Std(request.method_string()),
                                            Std(request.target()), request.body());
      } catch (const std::exception& e) {
        self->state_->Log(HttpLogLevel::kError,
                          std::string("http: route failed: ") + e.what());
        response = ApiResponse{};
        response.status = 500;
        response.body = "{\"error\":\"internal error\"}\n";
        response.route = RouteOf(Std(request.target()));
      }
      net::post(self->stream_.get_executor(), [self, response = std::move(response)]() mutable {
        self->OnHandled(std::move(response));
      });
    });
  }

  void OnHandled(ApiResponse response) {
    if (phase_ == Phase::kClosed) return;
    Respond(std::move(response), /*close=*/false);
  }

  // An answer the server makes itself (a request it could not read): always
  // closes the connection afterwards.
  void RespondError(unsigned status, const std::string& message) {
    ApiResponse response;
    response.status = status;
    response.body = "{\"error\":";
    AppendJsonString(message, &response.body);
    response.body += "}\n";
    if (parser_ && parser_->is_header_done()) {
      response.route = RouteOf(Std(parser_->get().target()));
      version_ = parser_->get().version();
      head_ = parser_->get().method() == http::verb::head;
    }
    Respond(std::move(response), /*close=*/true);
  }

  void Respond(ApiResponse answer, bool close) {
    phase_ = Phase::kWriting;
    if (state_->metrics != nullptr) state_->metrics->CountHttpRequest(answer.route, answer.status);
    close_ = close;
    response_ = {};
    response_.version(version_);
    response_.result(answer.status);
    response_.set(http::field::server, kServerHeader);
    response_.set(http::field::content_type, answer.content_type);
    if (!answer.allow.empty()) response_.set(http::field::allow, answer.allow);
    if (answer.status == 503) response_.set(http::field::retry_after, "5");
    if (answer.status == 401) response_.set(http::field::www_authenticate, "Bearer");
    response_.keep_alive(!close && keep_alive_ && !shutting_down_ && !state_->stopping);
    const std::size_t length = answer.body.size();
    response_.body() = std::move(answer.body);
    response_.prepare_payload();
    if (head_) {
      response_.body().clear();
      response_.content_length(length);
    }
    Lowest().expires_after(state_->options.write_timeout);
    http::async_write(stream_, response_,
                      [self = this->shared_from_this()](
                          beast::error_code ec, std::size_t) { self->OnWrite(ec); });
  }

  void OnWrite(beast::error_code ec) {
    if (ec) return OnWriteError(ec);
    if (close_) return DoLinger();
    if (!response_.keep_alive()) return Close();
    DoRead();
  }

  void OnWriteError(beast::error_code ec) {
    if (!IsExpectedEnd(ec)) {
      state_->Log(HttpLogLevel::kWarning, "http: write failed: " + ec.message());
    }
    Close();
  }

  // Half-closes, then reads and drops what the client still sends (bounded),
  // so that it sees the answer rather than a reset.
  void DoLinger() {
    phase_ = Phase::kLingering;
    beast::error_code ignored;
    Lowest().socket().shutdown(tcp::socket::shutdown_send, ignored);
    Lowest().expires_after(kLingerTime);
    buffer_.clear();
    DoLingerRead();
  }

  void DoLingerRead() {
    stream_.async_read_some(
        net::buffer(linger_buffer_),
        [self = this->shared_from_this()](beast::error_code ec, std::size_t n) {
          self->lingered_ += n;
          if (ec || self->lingered_ >= kLingerBytes || self->phase_ == Phase::kClosed) {
            return self->Close();
          }
          self->DoLingerRead();
        });
  }

  void Close() {
    if (phase_ == Phase::kClosed) return;
    phase_ = Phase::kClosed;
    beast::error_code ignored;
    Lowest().socket().shutdown(tcp::socket::shutdown_both, ignored);
    Lowest().close();
    Unregister();
  }

  // The connection no longer counts as open (its socket is closed, though a
  // worker may still hold the session until its route returns).
  void Unregister() {
    if (!registered_) return;
    registered_ = false;
    {
      std::lock_guard<std::mutex> lock(state_->mutex);
      state_->sessions.erase(this);
    }
    state_->OnSessionClosed();
  }

  Stream stream_;
  beast::flat_buffer buffer_;
  std::shared_ptr<State> state_;
  std::optional<http::request_parser<http::string_body>> parser_;
  std::optional<http::response<http::empty_body>> continue_;
  http::response<http::string_body> response_;
  std::array<char, 16384> linger_buffer_;
  std::size_t lingered_ = 0;
  Phase phase_ = Phase::kWaiting;
  unsigned version_ = 11;
  bool keep_alive_ = true;
  bool head_ = false;
  bool close_ = false;
  bool shutting_down_ = false;
  bool registered_ = true;  // in state_->sessions (OnAccept put it there)
};

}  // namespace

void HttpServer::State::DoAccept() {
  acceptor.async_accept(net::make_strand(io),
                        [self = shared_from_this()](beast::error_code ec, tcp::socket socket) {
                          self->OnAccept(ec, std::move(socket));
                        });
}

void HttpServer::State::OnAccept(beast::error_code ec, tcp::socket socket) {
  if (ec == net::error::operation_aborted || stopping) {
    std::lock_guard<std::mutex> lock(mutex);
    accepting = false;
    return;  // stopping; the socket (if any) closes here
  }
  if (ec) {
    Log(HttpLogLevel::kWarning, "http: accept failed: " + ec.message());
    accept_timer.expires_after(kAcceptRetryDelay);
    accept_timer.async_wait([self = shared_from_this()](beast::error_code timer_ec) {
      if (timer_ec || self->stopping) {
        std::lock_guard<std::mutex> lock(self->mutex);
        self->accepting = false;
        return;
      }
      self->DoAccept();
    });
    return;
  }
  std::shared_ptr<SessionBase> session;
  if (options.tls) {
    session = std::make_shared<Session<beast::ssl_stream<beast::tcp_stream>>>(
        shared_from_this(), std::move(socket), *options.tls);
  } else {
    session = std::make_shared<Session<beast::tcp_stream>>(shared_from_this(),
                                                           std::move(socket));
  }
  bool more = false;
  std::size_t open = 0;
  {
    std::lock_guard<std::mutex> lock(mutex);
    sessions.emplace(session.get(), session);
    open = sessions.size();
    more = open < options.max_connections;
    accepting = more;
  }
  if (metrics != nullptr) metrics->SetHttpConnections(open);
  session->Run();
  if (more) DoAccept();
}

std::vector<std::shared_ptr<SessionBase>> HttpServer::State::LiveSessions() {
  std::vector<std::shared_ptr<SessionBase>> live;
  std::lock_guard<std::mutex> lock(mutex);
  for (auto& [raw, weak] : sessions) {
    if (auto session = weak.lock()) live.push_back(std::move(session));
  }
  return live;
}

void HttpServer::State::OnSessionClosed() {
  bool resume = false;
  bool finish = false;
  std::size_t open = 0;
  {
    std::lock_guard<std::mutex> lock(mutex);
    if (detached) return;
    open = sessions.size();
    if (stop_requested) {
      finish = open == 0;
    } else if (started && !accepting && open < options.max_connections) {
      accepting = resume = true;
    }
  }
  if (metrics != nullptr) metrics->SetHttpConnections(open);
  if (resume) net::post(acceptor.get_executor(), [self = shared_from_this()] { self->DoAccept(); });
  if (finish) net::post(acceptor.get_executor(), [self = shared_from_this()] { self->Finish(); });
}

void HttpServer::State::BeginStop(std::chrono::milliseconds grace) {
  beast::error_code ignored;
  acceptor.close(ignored);  // a pending accept completes with operation_aborted
  accept_timer.cancel();
  std::vector<std::shared_ptr<SessionBase>> live = LiveSessions();
  for (auto& session : live) session->PostShutdown(/*force=*/false);
  const bool none_open = live.empty();
  live.clear();  // may run session destructors: no lock held here
  if (none_open) {
    bool empty = false;
    {
      std::lock_guard<std::mutex> lock(mutex);
      empty = sessions.empty();
    }
    if (empty) return Finish();
  }
  grace_timer.expires_after(grace);
  grace_timer.async_wait([self = shared_from_this()](beast::error_code ec) {
    if (ec) return;  // cancelled by Finish
    std::vector<std::shared_ptr<SessionBase>> left = self->LiveSessions();
    if (!left.empty()) {
      self->Log(HttpLogLevel::kWarning, "http: closing " + std::to_string(left.size()) +
                                            " connection(s) still busy after the grace period");
    }
    for (auto& session : left) session->PostShutdown(/*force=*/true);
  });
}

// On the acceptor's strand. on_stopped runs before WaitStopped returns.
void HttpServer::State::Finish() {
  std::function<void()> callback;
  {
    std::lock_guard<std::mutex> lock(mutex);
    if (finishing) return;
    finishing = true;
    callback = std::move(on_stopped);
  }
  grace_timer.cancel();
  Log(HttpLogLevel::kInfo, "http: stopped");
  if (callback) callback();
  {
    std::lock_guard<std::mutex> lock(mutex);
    finished = true;
  }
  finished_cv.notify_all();
}

HttpServer::HttpServer(net::io_context& io, tcp::endpoint endpoint, ServiceView& view,
                       ServiceMetrics* metrics, HttpServerOptions options, HttpLogger logger)
    : state_(std::make_shared<State>(io, std::move(endpoint), view, metrics, std::move(options),
                                     std::move(logger))) {}

HttpServer::~HttpServer() {
  {
    std::lock_guard<std::mutex> lock(state_->mutex);
    state_->stopping = true;
  }
  state_->ingest_workers.join();  // no route runs after these
  state_->query_workers.join();
  std::lock_guard<std::mutex> lock(state_->mutex);
  state_->detached = true;
}

Status HttpServer::Start() {
  std::string why;
  if (!state_->options.IsValid(&why)) return Status::InvalidArgument("http: " + why);
  {
    std::lock_guard<std::mutex> lock(state_->mutex);
    if (state_->started || state_->stop_requested) {
      return Status::FailedPrecondition("http: Start called twice or after Stop");
    }
  }
  tcp::acceptor& acceptor = state_->acceptor;
  beast::error_code ec;
  const auto fail = [&](std::string_view step) {
    beast::error_code ignored;
    acceptor.close(ignored);
    std::ostringstream address;
    address << state_->requested;
    return Status::Unavailable("http: cannot " + std::string(step) + " " + address.str() +
                               ": " + ec.message());
  };
  acceptor.open(state_->requested.protocol(), ec);
  if (ec) return fail("open a socket for");
  acceptor.set_option(net::socket_base::reuse_address(true), ec);
  if (ec) return fail("set SO_REUSEADDR on");
  acceptor.bind(state_->requested, ec);
  if (ec) return fail("bind");
  acceptor.listen(net::socket_base::max_listen_connections, ec);
  if (ec) return fail("listen on");
  const tcp::endpoint bound = acceptor.local_endpoint(ec);
  if (ec) return fail("read the address of");
  {
    std::lock_guard<std::mutex> lock(state_->mutex);
    state_->bound = bound;
    state_->started = true;
    state_->accepting = true;
  }
  std::ostringstream address;
  address << bound;
  state_->Log(HttpLogLevel::kInfo, "http: listening on " + address.str());
  net::post(acceptor.get_executor(), [state = state_] { state->DoAccept(); });
  return Status::Ok();
}

tcp::endpoint HttpServer::local_endpoint() const {
  std::lock_guard<std::mutex> lock(state_->mutex);
  return state_->bound;
}

void HttpServer::Stop(std::chrono::milliseconds grace, std::function<void()> on_stopped) {
  {
    std::lock_guard<std::mutex> lock(state_->mutex);
    if (state_->stop_requested) return;
    state_->stop_requested = true;
    state_->stopping = true;
    state_->on_stopped = std::move(on_stopped);
  }
  net::post(state_->acceptor.get_executor(),
            [state = state_, grace] { state->BeginStop(grace); });
}

bool HttpServer::WaitStopped(std::chrono::milliseconds timeout) {
  std::unique_lock<std::mutex> lock(state_->mutex);
  return state_->finished_cv.wait_for(lock, timeout, [this] { return state_->finished; });
}

std::size_t HttpServer::open_connections() const {
  std::lock_guard<std::mutex> lock(state_->mutex);
  return state_->sessions.size();
}

}  // namespace plumbline
