// PipelineObserver: what the serve pipeline reports as it runs (readings
// accepted and refused, events, shard gauges, latency, sink failures). The
// service hands one to every shard, input and sink; serve_command.cc forwards
// it to the Prometheus registry, tests count with it. Every method has an
// empty default. Thread-safe: implementations are called from shard, input
// and sink threads at once.
#pragma once

#include <cstddef>
#include <cstdint>
#include <string_view>

#include "daemon/engine.h"
#include "daemon/reading_parser.h"

namespace plumbline {

class PipelineObserver {
 public:
  virtual ~PipelineObserver() = default;
  // The engine's verdict on `n` readings.
  virtual void OnOutcome(IngestOutcome /*outcome*/, std::uint64_t /*n*/) {}
  // `n` lines the parser refused.
  virtual void OnParseRejected(ReadingError /*reason*/, std::uint64_t /*n*/) {}
  // One alert or event, as the dispatcher hands it to the sinks.
  virtual void OnEvent(const Alert& /*alert*/) {}
  // A series seen for the first time by its shard.
  virtual void OnNewSeries(std::size_t /*shard*/, std::string_view /*series*/) {}
  virtual void OnSeriesCount(std::size_t /*shard*/, std::size_t /*series*/) {}
  virtual void OnQueueDepth(std::size_t /*shard*/, std::size_t /*depth*/) {}
  virtual void OnQueueCapacity(std::size_t /*shard*/, std::size_t /*capacity*/) {}
  // From an input handing a batch to a shard until the shard has processed it.
  virtual void OnBatchLatency(double /*seconds*/) {}
  // A failed write or delivery by sink name (alert_log, webhook, dead_letter, stdout).
  virtual void OnSinkFailure(std::string_view /*sink*/) {}
  virtual void OnReady(bool /*ready*/) {}
  // A connection closed or refused by the daemon: `input` tcp or http,
  // `reason` idle_timeout, too_many_connections, unauthorized, tls_handshake...
  virtual void OnConnectionDropped(std::string_view /*input*/, std::string_view /*reason*/) {}
  // Bytes held by the ingest memory budget now, and its bound.
  virtual void OnIngestMemory(std::size_t /*bytes*/, std::size_t /*budget*/) {}
  // An input met a full budget (tcp and file paused; http answered 503).
  virtual void OnOverloaded(std::string_view /*input*/) {}
};

}  // namespace plumbline
