#include "daemon/tcp_listener.h"

#include <utility>
#include <algorithm>
#include <array>
#include <boost/asio/post.hpp>
#include <boost/asio/ssl/error.hpp>
#include <boost/asio/ssl/stream.hpp>
#include <boost/asio/steady_timer.hpp>
#include <boost/asio/write.hpp>
#include <chrono>
#include <optional>
#include <shared_mutex>
#include <unordered_map>

#include "daemon/access.h"
#include "daemon/clock.h"
#include "daemon/log.h"
#include "daemon/write_ahead_log.h"

namespace plumbline {
namespace {

namespace asio = boost::asio;
using tcp = asio::ip::tcp;
using SteadyTime = std::chrono::steady_clock::time_point;

constexpr std::size_t kReadBytes = 64 * 1024;  // one read; also what a session pins

// Acknowledged mode (with a write-ahead log). A sender that must not lose or
// repeat a reading opens with the line
//
//   ack <stream name>
//
// naming its stream (one connection per stream at a time; names up to
// kMaxStreamLineBytes). The server answers `durable <n>`: n complete lines
// of that stream are durable (in the fsynced log or a checkpoint), counted
// over every connection and restart since the stream began. The sender sends
// its lines from line n + 1 on; as they become durable the server writes
// `durable <n>` again (cumulative; several may be folded into one). After a
// broken connection or a restart the sender reconnects, reads n and resends
// from there: nothing is lost, nothing is taken twice. Every line counts
// (refused ones too) and must end with a newline; the `ack` line itself does
// not count. Without a first `ack` line a connection is unacknowledged, as
// before.
constexpr std::size_t kMaxStreamLineBytes = 300;
constexpr std::string_view kStreamPrefix = "ack ";

// Longest token line accepted before the connection is refused as unauthorized.
constexpr std::size_t kMaxTokenLineBytes = 1024;

std::string Describe(const tcp::endpoint& endpoint) {
  const auto address = endpoint.address();
  return (address.is_v6() ? "[" + address.to_string() + "]" : address.to_string()) + ":" +
         std::to_string(endpoint.port());
}

// The sender finished: a plain end of stream, or a TLS peer that closed
// without its close_notify (as most clients do).
bool EndOfStream(const boost::system::error_code& error) {
  return error == asio::error::eof || error == asio::ssl::error::stream_truncated;
}

bool Expected(const boost::system::error_code& error) {
  return EndOfStream(error) || error == asio::error::operation_aborted ||
         error == asio::error::connection_reset || error == asio::error::bad_descriptor;
}

class Session;

}  // namespace

struct TcpListener::State : std::enable_shared_from_this<TcpListener::State> {
  State(asio::io_context& io_context, TcpListenerOptions o, ShardSet* s,
        PipelineObserver* ob, TcpIngestRules r)
      : io(io_context),
        options(std::move(o)),
        rules(std::move(r)),
        shards(s),
        observer(ob),
        acceptor(io_context) {}

  void DoAccept();
  void OnAccept(const boost::system::error_code& error, tcp::socket socket);
  void CloseAll();

  asio::io_context& io;
  const TcpListenerOptions options;
  const TcpIngestRules rules;
  ShardSet* const shards;
  PipelineObserver* const observer;
  WriteAheadLog* wal = nullptr;  // acknowledged mode when set
  tcp::acceptor acceptor;
  tcp::endpoint endpoint;
  std::atomic<std::size_t> open{0};
  std::atomic<std::uint64_t> accepted{0};
  // I/O thread only:
  bool stopped = false;
  std::unordered_map<Session*, std::weak_ptr<Session>> sessions;
  std::uint64_t refused_over_limit = 0;
  // Time the I/O thread spent in the parsers and routers (mostly waiting on
  // backpressure), when no connection could be read.
  std::chrono::steady_clock::duration stalled{};
};

namespace {

class Session : public std::enable_shared_from_this<Session> {
 public:
  Session(std::shared_ptr<TcpListener::State> state, tcp::socket socket, std::string peer)
      : state_(std::move(state)),
        tls_(state_->rules.tls ? std::make_unique<asio::ssl::stream<tcp::socket>>(
                                     std::move(socket), *state_->rules.tls)
                               : nullptr),
        socket_(tls_ ? tcp::socket(state_->io) : std::move(socket)),
        timer_(state_->io),
        peer_(std::move(peer)),
        router_(state_->shards),
        parser_(
            ReadingParserOptions{state_->options.max_line_bytes},
            [this](const Reading& reading) {
              if (!router_.Add(reading, parser_.line_number())) shards_closed_ = true;
            },
            [this](std::uint64_t line, ReadingError reason, std::string_view detail) {
              if (state_->observer) state_->observer->OnParseRejected(reason, 1);
              if (++rejected_ <= TcpListener::kLoggedRejections) {
                LogWarning("line refused", {{"input", "tcp"},
                                            {"peer", peer_},
                                            {"line", line},
                                            {"reason", ToString(reason)},
                                            {"detail", detail}});
              }
            }) {}

  void Start() {
    last_activity_ = std::chrono::steady_clock::now();
    if (tls_) {
      DoHandshake();
    } else {
      DoRead();
    }
    DoWaitIdle(std::chrono::microseconds(state_->options.idle_timeout));
  }

  void Close(std::string_view why) {
    if (closed_) return;
    closed_ = true;
    boost::system::error_code ignored;
    Socket().shutdown(tcp::socket::shutdown_both, ignored);
    Socket().close(ignored);
    timer_.cancel();
    router_.Flush();
    state_->sessions.erase(this);
    state_->open.fetch_sub(1);
    LogDebug("connection closed", {{"input", "tcp"},
                                   {"peer", peer_},
                                   {"why", why},
                                   {"readings", router_.routed()},
                                   {"refused_lines", rejected_}});
    if (rejected_ > TcpListener::kLoggedRejections) {
      LogWarning("connection closed after refusing lines",
                 {{"input", "tcp"},
                  {"peer", peer_},
                  {"refused_lines", rejected_},
                  {"logged", TcpListener::kLoggedRejections}});
    }
  }

 private:
  tcp::socket& Socket() { return tls_ ? tls_->next_layer() : socket_; }

  void DoHandshake() {
    tls_->async_handshake(
        asio::ssl::stream_base::server,
        [self = shared_from_this()](const boost::system::error_code& error) {
          self->OnHandshake(error);
        });
  }

  void OnHandshake(const boost::system::error_code& error) {
    if (closed_) return;
    if (error) {
      if (state_->observer) state_->observer->OnConnectionDropped("tcp", "tls_handshake");
      LogDebug("tls handshake failed",
               {{"input", "tcp"}, {"peer", peer_}, {"error", error.message()}});
      Close("tls handshake failed");
      return;
    }
    DoRead();
  }

  void DoRead() {
    auto on_read = [self = shared_from_this()](const boost::system::error_code& error,
                                               std::size_t bytes) {
      self->OnRead(error, bytes);
    };
    if (tls_) {
      tls_->async_read_some(asio::buffer(buffer_), std::move(on_read));
    } else {
      socket_.async_read_some(asio::buffer(buffer_), std::move(on_read));
    }
  }

  void OnRead(const boost::system::error_code& error, std::size_t bytes) {
    if (closed_) return;
    if (bytes > 0) {
      last_activity_ = std::chrono::steady_clock::now();
      std::string_view data(buffer_.data(), bytes);
      if (!authenticated_ && !Authenticate(&data, error)) return;
      if (!stream_checked_ && state_->wal && !TakeStreamLine(&data, error)) return;
      if (state_->rules.max_time_ahead > 0) {
        parser_.set_latest_time(WallClockNow() + state_->rules.max_time_ahead);
      }
      const SteadyTime fed_at = std::chrono::steady_clock::now();
      {
        std::shared_lock<std::shared_mutex> gate;  // acknowledged: pushes and mark together
        if (!stream_.empty()) gate = std::shared_lock(state_->wal->stream_gate());
        parser_.Feed(data);
        router_.Flush();
        if (!stream_.empty()) MarkDurable(data);
      }
      // Time spent waiting for the shards (backpressure) is not the peers'
      // idling: no connection was read meanwhile.
      const SteadyTime done_at = std::chrono::steady_clock::now();
      state_->stalled += done_at - fed_at;
      last_activity_ = done_at;
      stalled_at_activity_ = state_->stalled;
    }
    if (error) {
      if (EndOfStream(error)) {
        parser_.Finish();  // a last line without its newline still counts
        router_.Flush();
      } else if (!Expected(error)) {
        LogWarning("connection read failed",
                   {{"input", "tcp"}, {"peer", peer_}, {"error", error.message()}});
      }
      Close(EndOfStream(error) ? "end of stream" : "read error");
      return;
    }
    if (shards_closed_) {
      Close("shutting down");
      return;
    }
    DoRead();
  }

  // Gathers the token line; once it is complete and right, leaves in *data
  // what follows it and returns true. Otherwise false: the connection was
  // closed (wrong token, no line end in time, end of stream), or the line is
  // still incomplete and the next read was started.
  bool Authenticate(std::string_view* data, const boost::system::error_code& error) {
    const std::size_t end = data->find('\n');
    token_line_.append(data->substr(0, end));
    if (end == std::string_view::npos) {
      if (token_line_.size() > kMaxTokenLineBytes || error) {
        Refuse("no token line");
      } else {
        DoRead();
      }
      return false;
    }
    data->remove_prefix(end + 1);
    std::string_view line = token_line_;
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    const bool prefixed = line.substr(0, kTcpTokenPrefix.size()) == kTcpTokenPrefix;
    if (!prefixed || !TokenMatches(line.substr(kTcpTokenPrefix.size()), state_->rules.token)) {
      Refuse(prefixed ? "wrong token" : "first line is not a token line");
      return false;
    }
    authenticated_ = true;
    token_line_.clear();
    token_line_.shrink_to_fit();
    return true;
  }

  // Closes an unauthenticated connection (the token itself is never logged).
  void Refuse(std::string_view why) {
    if (state_->observer) state_->observer->OnConnectionDropped("tcp", "unauthorized");
    LogWarning("connection refused: unauthorized",
               {{"input", "tcp"}, {"peer", peer_}, {"why", why}});
    Close("unauthorized");
  }

  // Gathers the first line. An `ack` line starts acknowledged mode and is
  // consumed; any other first line is fed as readings. False while the line
  // is incomplete (the next read was started) or the connection closed.
  bool TakeStreamLine(std::string_view* data, const boost::system::error_code& error) {
    const std::size_t end = data->find('\n');
    stream_line_.append(data->substr(0, end));
    if (end == std::string_view::npos && stream_line_.size() <= kMaxStreamLineBytes &&
        !error) {
      DoRead();
      return false;
    }
    stream_checked_ = true;
    std::string_view line = stream_line_;
    if (!line.empty() && line.back() == '\r') line.remove_suffix(1);
    if (end == std::string_view::npos || line.substr(0, kStreamPrefix.size()) != kStreamPrefix) {
      if (end != std::string_view::npos) {
        stream_line_ += '\n';
        data->remove_prefix(end + 1);
      } else {
        *data = {};  // all of it is in stream_line_
      }
      parser_.Feed(stream_line_);  // a reading, not a stream line
      stream_line_.clear();
      return true;
    }
    data->remove_prefix(end + 1);
    stream_ = std::string(line.substr(kStreamPrefix.size()));
    stream_line_.clear();
    if (stream_.empty() || IsInternalStreamName(stream_)) {
      const char* why = stream_.empty() ? "empty stream name" : "stream name reserved";
      if (state_->observer) state_->observer->OnConnectionDropped("tcp", "bad_stream_name");
      LogWarning("connection refused: bad stream name",
                 {{"input", "tcp"}, {"peer", peer_}, {"stream", stream_}, {"why", why}});
      Close(why);
      return false;
    }
    router_.set_stream(stream_);
    std::uint64_t through = 0;
    const auto streams = state_->wal->Streams(&through);
    const auto known = streams.find(stream_);
    lines_ = known == streams.end() ? 0 : known->second;
    LogDebug("acknowledged stream", {{"input", "tcp"}, {"peer", peer_}, {"stream", stream_},
                                     {"durable_lines", lines_}});
    // Whatever an earlier connection of the stream sent after its last mark
    // is sent again from line lines_ + 1 on; a restart must not take it too.
    through = state_->wal->AppendResume(stream_, lines_);
    AcknowledgeWhenDurable(through, lines_);
    return true;
  }

  // After a read in acknowledged mode: logs how many lines the stream has
  // sent, and acknowledges them once that mark is durable.
  void MarkDurable(std::string_view data) {
    const auto complete = static_cast<std::uint64_t>(std::count(data.begin(), data.end(), '\n'));
    if (complete == 0) return;
    lines_ += complete;
    AcknowledgeWhenDurable(state_->wal->AppendMark(stream_, lines_), lines_);
  }

  void AcknowledgeWhenDurable(std::uint64_t sequence, std::uint64_t lines) {
    state_->wal->OnDurable(sequence, [weak = weak_from_this(), &io = state_->io, lines] {
      asio::post(io, [weak, lines] {
        if (auto self = weak.lock()) self->Acknowledge(lines);
      });
    });
  }

  void Acknowledge(std::uint64_t lines) {
    if (closed_) return;
    if (!ack_target_ || lines > *ack_target_) ack_target_ = lines;
    if (!writing_ack_) DoWriteAck();
  }

  void DoWriteAck() {
    writing_ack_ = true;
    ack_written_ = ack_target_;
    ack_text_ = "durable " + std::to_string(*ack_target_) + "\n";
    auto on_write = [self = shared_from_this()](const boost::system::error_code& error,
                                                std::size_t) { self->OnWriteAck(error); };
    if (tls_) {
      asio::async_write(*tls_, asio::buffer(ack_text_), std::move(on_write));
    } else {
      asio::async_write(socket_, asio::buffer(ack_text_), std::move(on_write));
    }
  }

  void OnWriteAck(const boost::system::error_code& error) {
    writing_ack_ = false;
    if (error || closed_) return;  // the read side sees the broken connection
    if (ack_target_ != ack_written_) DoWriteAck();
  }

  void DoWaitIdle(std::chrono::steady_clock::duration wait) {
    timer_.expires_after(wait);
    timer_.async_wait(
        [self = shared_from_this()](const boost::system::error_code& error) {
          self->OnIdleTimer(error);
        });
  }

  void OnIdleTimer(const boost::system::error_code& error) {
    if (closed_ || error == asio::error::operation_aborted) return;
    const auto idle_limit = std::chrono::microseconds(state_->options.idle_timeout);
    // Not counting the time the I/O thread spent feeding the shards since.
    const auto idle = std::chrono::steady_clock::now() - last_activity_ -
                      (state_->stalled - stalled_at_activity_);
    if (idle >= idle_limit) {
      LogInfo("idle connection closed",
              {{"input", "tcp"},
               {"peer", peer_},
               {"idle_seconds", std::chrono::duration<double>(idle).count()}});
      if (state_->observer) state_->observer->OnConnectionDropped("tcp", "idle_timeout");
      Close("idle timeout");
      return;
    }
    DoWaitIdle(idle_limit - idle);  // re-armed once per period, not per read
  }

  std::shared_ptr<TcpListener::State> state_;
  std::unique_ptr<asio::ssl::stream<tcp::socket>> tls_;  // set: TLS (owns the socket)
  tcp::socket socket_;                                   // plain text (unused with TLS)
  asio::steady_timer timer_;
  const std::string peer_;
  ShardRouter router_;
  ReadingParser parser_;
  std::array<char, kReadBytes> buffer_;
  SteadyTime last_activity_;
  std::chrono::steady_clock::duration stalled_at_activity_{};  // state_->stalled then
  std::uint64_t rejected_ = 0;
  bool authenticated_ = state_->rules.token.empty();  // no token asked, or given
  std::string token_line_;  // the first line while it arrives (with a token only)
  // Acknowledged mode (with a write-ahead log only).
  bool stream_checked_ = false;
  std::string stream_line_;  // the first line while it arrives
  std::string stream_;       // empty: not acknowledged
  std::uint64_t lines_ = 0;  // complete lines of the stream so far
  std::optional<std::uint64_t> ack_target_, ack_written_;
  bool writing_ack_ = false;
  std::string ack_text_;
  bool shards_closed_ = false;
  bool closed_ = false;
};

}  // namespace

void TcpListener::State::DoAccept() {
  acceptor.async_accept([self = shared_from_this()](
                            const boost::system::error_code& error, tcp::socket socket) {
    self->OnAccept(error, std::move(socket));
  });
}

void TcpListener::State::OnAccept(const boost::system::error_code& error,
                                  tcp::socket socket) {
  if (stopped) return;
  if (error) {
    if (error != asio::error::operation_aborted) {
      LogWarning("accept failed", {{"input", "tcp"}, {"error", error.message()}});
      DoAccept();
    }
    return;
  }
  boost::system::error_code peer_error;
  const tcp::endpoint remote = socket.remote_endpoint(peer_error);
  const std::string peer = peer_error ? std::string("unknown") : Describe(remote);
  if (open.load() >= static_cast<std::size_t>(options.max_connections)) {
    if (refused_over_limit++ % 100 == 0) {  // one line per hundred refusals
      LogWarning("connection refused: too many open",
                 {{"input", "tcp"},
                  {"peer", peer},
                  {"max_connections", options.max_connections},
                  {"refused_so_far", refused_over_limit}});
    }
    if (observer) observer->OnConnectionDropped("tcp", "too_many_connections");
    boost::system::error_code ignored;
    socket.close(ignored);
    DoAccept();
    return;
  }
  accepted.fetch_add(1);
  open.fetch_add(1);
  auto session = std::make_shared<Session>(shared_from_this(), std::move(socket), peer);
  sessions[session.get()] = session;
  LogDebug("connection opened", {{"input", "tcp"}, {"peer", peer}});
  session->Start();
  DoAccept();
}

void TcpListener::State::CloseAll() {
  stopped = true;
  boost::system::error_code ignored;
  acceptor.close(ignored);
  auto sessions_copy = sessions;
  for (auto& [raw, weak] : sessions_copy) {
    if (auto session = weak.lock()) session->Close("shutting down");
  }
}

TcpListener::TcpListener(asio::io_context& io, TcpListenerOptions options,
                         ShardSet* shards, PipelineObserver* observer, TcpIngestRules rules)
    : state_(std::make_shared<State>(io, std::move(options), shards, observer,
                                     std::move(rules))) {}

TcpListener::~TcpListener() = default;

Status TcpListener::Start() {
  State& s = *state_;
  boost::system::error_code error;
  const auto address = asio::ip::make_address(s.options.address, error);
  if (error) {
    return Status::InvalidArgument("tcp listener: bad address '" + s.options.address +
                                   "': " + error.message());
  }
  const tcp::endpoint endpoint(address, static_cast<unsigned short>(s.options.port));
  const std::string where = Describe(endpoint);
  s.acceptor.open(endpoint.protocol(), error);
  if (!error) s.acceptor.set_option(asio::socket_base::reuse_address(true), error);
  if (!error) s.acceptor.bind(endpoint, error);
  if (!error) s.acceptor.listen(asio::socket_base::max_listen_connections, error);
  if (error) {
    return Status::Unavailable("tcp listener: cannot listen on " + where + ": " +
                               error.message());
  }
  s.endpoint = s.acceptor.local_endpoint(error);
  LogInfo("listening", {{"input", "tcp"}, {"address", Describe(s.endpoint)}});
  asio::post(s.io, [state = state_] { state->DoAccept(); });
  return Status::Ok();
}

boost::asio::ip::tcp::endpoint TcpListener::local_endpoint() const {
  return state_->endpoint;
}

void TcpListener::set_write_ahead_log(WriteAheadLog* wal) { state_->wal = wal; }

void TcpListener::Stop() {
  asio::post(state_->io, [state = state_] { state->CloseAll(); });
}

std::size_t TcpListener::open_connections() const { return state_->open.load(); }
std::uint64_t TcpListener::accepted_connections() const {
  return state_->accepted.load();
}

}  // namespace plumbline
