// IngestBudget: a bound, in bytes, on the readings in flight between the
// inputs and the shards (batches queued or being processed, HTTP bodies being
// ingested), so that ten times more offered load than the shards can process
// never grows memory past `ingest_memory_bytes`. An input takes bytes before
// it hands a batch over and the bytes come back when the shard is done with
// it (an IngestLease travels with the batch). At the bound:
//   - TCP and file inputs wait (Acquire): their reads pause, the kernel's
//     buffers fill and TCP flow control slows the senders;
//   - HTTP ingest does not wait (TryAcquire): it answers 503 with Retry-After
//     and takes none of the body, so a client knows to send it all again.
// Every reading that was taken is processed: the budget refuses before a
// reading is accepted, never after.
//
// Thread-safe: inputs, shards and the HTTP threads share one budget.
#pragma once

#include <algorithm>
#include <condition_variable>
#include <cstddef>
#include <memory>
#include <mutex>
#include <string_view>

#include "daemon/pipeline_observer.h"

namespace plumbline {

class IngestBudget {
 public:
  // `observer` (may be null) hears the bytes held and each time an input
  // meets a full budget.
  explicit IngestBudget(std::size_t capacity, PipelineObserver* observer = nullptr)
      : capacity_(capacity), observer_(observer) {
    Report(0);
  }

  // Takes `bytes` (at most the capacity: a larger request takes it all),
  // waiting while they are not free; `input` names the waiting input once
  // for the overload counter.
  void Acquire(std::size_t bytes, std::string_view input) {
    bytes = std::min(bytes, capacity_);
    std::size_t held = 0;
    {
      std::unique_lock<std::mutex> lock(mutex_);
      if (used_ + bytes > capacity_) {
        if (observer_) observer_->OnOverloaded(input);
        freed_.wait(lock, [&] { return used_ + bytes <= capacity_; });
      }
      used_ += bytes;
      held = used_;
    }
    Report(held);
  }

  // Takes `bytes` (capped as in Acquire) only if they are free now; false,
  // counted as an overload of `input`, otherwise.
  bool TryAcquire(std::size_t bytes, std::string_view input) {
    bytes = std::min(bytes, capacity_);
    std::size_t held = 0;
    {
      std::lock_guard<std::mutex> lock(mutex_);
      if (used_ + bytes > capacity_) {
        if (observer_) observer_->OnOverloaded(input);
        return false;
      }
      used_ += bytes;
      held = used_;
    }
    Report(held);
    return true;
  }

  // Gives back bytes taken by Acquire or TryAcquire (the capped amount).
  void Release(std::size_t bytes) {
    bytes = std::min(bytes, capacity_);
    std::size_t held = 0;
    {
      std::lock_guard<std::mutex> lock(mutex_);
      used_ -= std::min(bytes, used_);
      held = used_;
    }
    freed_.notify_all();
    Report(held);
  }

  std::size_t capacity() const { return capacity_; }
  std::size_t used() const {
    std::lock_guard<std::mutex> lock(mutex_);
    return used_;
  }

 private:
  void Report(std::size_t held) {
    if (observer_) observer_->OnIngestMemory(held, capacity_);
  }

  const std::size_t capacity_;
  PipelineObserver* const observer_;
  mutable std::mutex mutex_;  // guards used_
  std::condition_variable freed_;
  std::size_t used_ = 0;
};

// Bytes taken from a budget, given back when the lease is destroyed (with the
// batch that carries it, once its shard is done with it, or dropped).
class IngestLease {
 public:
  IngestLease(IngestBudget* budget, std::size_t bytes) : budget_(budget), bytes_(bytes) {}
  ~IngestLease() {
    if (budget_) budget_->Release(bytes_);
  }
  IngestLease(const IngestLease&) = delete;
  IngestLease& operator=(const IngestLease&) = delete;

 private:
  IngestBudget* budget_;
  std::size_t bytes_;
};

}  // namespace plumbline
