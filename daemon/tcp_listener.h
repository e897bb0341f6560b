// TcpListener: the line input of `serve`. Each connection streams readings,
// one per line (DESIGN.md "Readings"), parsed as they arrive by its own
// ReadingParser and routed to the shards in batches. Nothing is sent back.
//
// - A line longer than max_line_bytes is refused (counted and logged), never
//   the connection; so is any other bad line. Each connection logs its first
//   kLoggedRejections bad lines with their line numbers, then only counts.
// - A connection that sends nothing for idle_timeout is closed. A slow sender
//   costs its own connection only (reads are asynchronous): at most one
//   unfinished line of max_line_bytes and one read buffer.
// - Readings stamped more than rules.max_time_ahead after the wall clock are
//   refused (time_in_future).
// - With rules.token set, the first line must be `token <token>` (access.h);
//   otherwise the connection is closed before any reading is taken.
// - With rules.tls every connection is TLS: its handshake comes first (within
//   idle_timeout); a client that fails it (one speaking plain text, say) is
//   closed and counted (reason tls_handshake) before any line is read.
// - At most max_connections are open; one more is accepted and closed at once,
//   with a warning.
// - Backpressure: when a shard's queue is full, the I/O thread waits in
//   ShardRouter::Add, so every connection stops being read; the kernel's
//   buffers fill and TCP flow control slows the senders.
// - Each connection flushes its batches after every read, so a reading waits
//   at most one read for its shard.
//
// Runs on the io_context it is given (one thread in serve). Sessions live
// through shared_from_this held by their pending handlers. Thread-safety:
// Start, Stop, local_endpoint and the counters may be called from any thread.
#pragma once

#include <utility>
#include <atomic>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/asio/ssl/context.hpp>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>

#include "config/service_options.h"
#include "daemon/pipeline_observer.h"
#include "daemon/shard.h"
#include "detectors/status.h"

namespace plumbline {

// What the service adds to the listener's own options.
struct TcpIngestRules {
  EventTime max_time_ahead = 0;  // 0: readings may be stamped any time ahead
  std::string token;             // non-empty: connections must present it first
  std::shared_ptr<boost::asio::ssl::context> tls;  // set: TLS only (daemon/tls.h)
};

class TcpListener {
 public:
  static constexpr int kLoggedRejections = 5;  // bad lines logged per connection

  // `shards` and `observer` (may be null) must outlive the listener.
  TcpListener(boost::asio::io_context& io, TcpListenerOptions options, ShardSet* shards,
              PipelineObserver* observer, TcpIngestRules rules = {});
  ~TcpListener();

  // Binds and listens on options.address:port, then accepts on the io_context.
  // Unavailable with the address and the system's reason when it cannot bind.
  Status Start();
  // Enables acknowledged mode (see tcp_listener.cc, "Acknowledged mode");
  // `wal` must be started and outlive the listener. Call before Start.
  void set_write_ahead_log(class WriteAheadLog* wal);
  // The bound address (the real port when port 0 was asked for).
  boost::asio::ip::tcp::endpoint local_endpoint() const;
  // Stops accepting and closes every connection after its current read
  // (partial lines are dropped; complete ones were already routed). Returns at
  // once; the work happens on the I/O thread.
  void Stop();

  std::size_t open_connections() const;
  std::uint64_t accepted_connections() const;

  struct State;  // shared with the sessions (tcp_listener.cc)

 private:
  std::shared_ptr<State> state_;
};

}  // namespace plumbline
