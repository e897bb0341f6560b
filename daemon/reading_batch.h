// ReadingBatch: what inputs hand to a shard, up to kMaxBatchReadings owned
// readings whose series names share one buffer (no allocation per reading once
// the buffers have grown). IngestTicket: how a caller that wants the shards'
// verdicts (the HTTP ingest answer) waits for them. Not thread-safe, except
// IngestTicket, which the shards and the waiting caller share.
#pragma once

#include <algorithm>
#include <chrono>
#include <condition_variable>
#include <cstddef>
#include <cstdint>
#include <memory>
#include <mutex>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/ingest_budget.h"
#include "daemon/reading_parser.h"

namespace plumbline {

// A full batch is handed over at once: large enough to amortise the queue's
// lock, small enough that one batch is processed in well under a millisecond.
inline constexpr std::size_t kMaxBatchReadings = 1024;

// The verdicts on every reading one caller sent, gathered across shards.
class IngestTicket {
 public:
  struct Refusal {
    std::uint64_t line = 0;  // 1-based, in the caller's input
    std::string reason;
  };
  static constexpr std::size_t kMaxRefusals = 10;  // first ones by line, for the answer

  // One more batch is on its way to a shard.
  void AddBatch() {
    std::lock_guard<std::mutex> lock(mutex_);
    ++pending_;
  }
  // A shard finished one batch: `accepted` readings taken, `refused` (at most
  // kMaxRefusals kept, by line) not.
  void BatchDone(std::uint64_t accepted, std::uint64_t refused,
                 const std::vector<Refusal>& first) {
    std::lock_guard<std::mutex> lock(mutex_);
    accepted_ += accepted;
    refused_ += refused;
    for (const Refusal& r : first) Keep(r);
    if (--pending_ == 0) done_.notify_all();
  }
  // A line refused before it reached a shard (by the parser).
  void Refuse(std::uint64_t line, std::string reason) {
    std::lock_guard<std::mutex> lock(mutex_);
    ++refused_;
    Keep({line, std::move(reason)});
  }
  // Waits until every batch is done; false when `timeout` passed first.
  bool Wait(std::chrono::milliseconds timeout) {
    std::unique_lock<std::mutex> lock(mutex_);
    return done_.wait_for(lock, timeout, [this] { return pending_ == 0; });
  }
  std::uint64_t accepted() const {
    std::lock_guard<std::mutex> lock(mutex_);
    return accepted_;
  }
  std::uint64_t refused() const {
    std::lock_guard<std::mutex> lock(mutex_);
    return refused_;
  }
  std::uint64_t pending() const {
    std::lock_guard<std::mutex> lock(mutex_);
    return pending_;
  }
  std::vector<Refusal> first_refusals() const {
    std::lock_guard<std::mutex> lock(mutex_);
    return first_;
  }

 private:
  void Keep(Refusal r) {  // keeps the kMaxRefusals lowest line numbers, sorted
    auto at = std::upper_bound(
        first_.begin(), first_.end(), r.line,
        [](std::uint64_t line, const Refusal& x) { return line < x.line; });
    if (first_.size() >= kMaxRefusals && at == first_.end()) return;
    first_.insert(at, std::move(r));
    if (first_.size() > kMaxRefusals) first_.pop_back();
  }

  mutable std::mutex mutex_;  // guards everything below
  std::condition_variable done_;
  std::uint64_t pending_ = 0, accepted_ = 0, refused_ = 0;
  std::vector<Refusal> first_;
};

struct ReadingBatch {
  struct Entry {
    EventTime time;
    double value;
    std::uint64_t line;        // in its input, for refusal reports
    std::uint32_t name_begin;  // into names
    std::uint32_t name_size;
  };
  std::string names;  // the series names, back to back
  std::vector<Entry> entries;
  std::shared_ptr<IngestTicket> ticket;               // null: nobody waits for verdicts
  std::shared_ptr<IngestLease> lease;  // its bytes of the ingest budget (null: none)
  std::chrono::steady_clock::time_point handed_at{};  // set when pushed, for latency
  // Write-ahead log (daemon/write_ahead_log.h): the producer's stream in
  // acknowledged mode ("" otherwise); the record's sequence, set by
  // Shard::Push (0: not logged); replayed batches come from the log and are
  // not logged again.
  std::string stream;
  std::uint64_t wal_sequence = 0;
  bool replayed = false;

  void Add(const Reading& reading, std::uint64_t line) {
    entries.push_back({reading.time, reading.value, line,
                       static_cast<std::uint32_t>(names.size()),
                       static_cast<std::uint32_t>(reading.series.size())});
    names.append(reading.series);
  }
  std::string_view name(const Entry& entry) const {
    return std::string_view(names).substr(entry.name_begin, entry.name_size);
  }
  bool full() const { return entries.size() >= kMaxBatchReadings; }
  // What the batch holds in memory, for the ingest budget.
  std::size_t MemoryBytes() const {
    return sizeof(ReadingBatch) + names.capacity() + entries.capacity() * sizeof(Entry);
  }
  bool empty() const { return entries.empty(); }
  std::size_t size() const { return entries.size(); }
};

}  // namespace plumbline
