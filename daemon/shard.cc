#include "daemon/shard.h"

#include <algorithm>

#include "daemon/log.h"
#include "daemon/write_ahead_log.h"

namespace plumbline {

bool ShardOptions::IsValid(std::string* why) const {
  auto fail = [why](const char* message) {
    if (why) *why = message;
    return false;
  };
  if (queue_batches < 1) return fail("queue_batches must be at least 1");
  if (tick <= 0) return fail("tick must be positive");
  if (recent_points > 4096) return fail("recent_points must be in [0, 4096]");
  if (recent_alerts > 4096) return fail("recent_alerts must be in [0, 4096]");
  return engine.IsValid(why);
}

void SeriesExtras::Note(const Alert& alert) {
  if (alert.event == EventType::kRetrain) {
    shifted = false;
    return;
  }
  if (alert.event != EventType::kAlert) return;
  ++alert_count;
  last_change_at = alert.change_at;
  if (alert.kind != AlertKind::kSilence) shifted = true;
}

ShardState::ShardState(std::size_t index, const Config& config,
                       const ShardOptions& options)
    : index_(index),
      config_(config),
      options_(options),
      engine_(std::make_unique<Engine>(config, options.engine)) {}

const SeriesExtras* ShardState::Find(std::string_view name) const {
  auto it = extras_.find(name);
  return it == extras_.end() ? nullptr : &it->second;
}

ReconfigureReport ShardState::Reconfigure(const Config& config, std::vector<Alert>* out) {
  config_ = config;
  ReconfigureReport report = engine_->Reconfigure(config, out);
  std::erase_if(extras_,
                [this](const auto& entry) { return !engine_->Find(entry.first); });
  // Entries may name dropped series, and deadlines changed: queue afresh.
  silence_queue_ = {};
  for (auto& [name, extras] : extras_) {
    extras.scheduled = false;
    ScheduleSilence(name, &extras);
  }
  return report;
}

void ShardState::ScheduleSilence(const std::string& name, SeriesExtras* extras) {
  if (extras->scheduled) return;
  const SeriesMonitor* monitor = engine_->Find(name);
  if (!monitor) return;
  const auto deadline = monitor->silence_deadline();
  if (!deadline) return;
  silence_queue_.emplace(extras->arrived + (*deadline - extras->newest), &name);
  extras->scheduled = true;
}

void ShardState::CheckSilences(EventTime now, std::vector<Alert>* out) {
  while (!silence_queue_.empty() && silence_queue_.top().first <= now) {
    const std::string& name = *silence_queue_.top().second;
    silence_queue_.pop();
    auto it = extras_.find(name);
    if (it == extras_.end()) continue;
    SeriesExtras& extras = it->second;
    extras.scheduled = false;
    const SeriesMonitor* monitor = engine_->Find(name);
    const auto deadline = monitor ? monitor->silence_deadline() : std::nullopt;
    if (!deadline) continue;  // silent already: its next reading queues it again
    const EventTime due = extras.arrived + (*deadline - extras.newest);
    if (due > now) {  // readings came since: wait for the current due time
      silence_queue_.emplace(due, &it->first);
      extras.scheduled = true;
      continue;
    }
    engine_->AdvanceSeriesClock(name, extras.newest + (now - extras.arrived), out);
  }
}

Shard::Shard(std::size_t index, const Config& config, ShardOptions options,
             const Clock* clock, AlertPublisher* publisher, PipelineObserver* observer)
    : index_(index),
      options_(std::move(options)),
      clock_(clock),
      publisher_(publisher),
      observer_(observer),
      state_(index, config, options_) {
  if (observer_) observer_->OnQueueCapacity(index_, options_.queue_batches);
}

Shard::~Shard() {
  CloseInput();
  Join();
}

void Shard::Start() {
  last_tick_ = clock_->Now();
  thread_ = std::thread([this] { Run(); });
}

bool Shard::Push(ReadingBatch* batch) {
  std::size_t depth = 0;
  {
    std::unique_lock<std::mutex> lock(mutex_);
    not_full_.wait(lock, [this] {
      return input_closed_ || batches_.size() < options_.queue_batches;
    });
    if (input_closed_) return false;
    batch->handed_at = std::chrono::steady_clock::now();
    // Logged under the queue's lock: the log's order is this queue's order.
    if (options_.wal && !batch->replayed) {
      batch->wal_sequence = options_.wal->AppendBatch(*batch, batch->stream);
    }
    batches_.push_back(std::move(*batch));
    depth = batches_.size();
  }
  not_empty_.notify_one();
  if (observer_) observer_->OnQueueDepth(index_, depth);
  return true;
}

bool Shard::Post(std::function<void(ShardState&)> task) {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    if (stopped_) return false;
    tasks_.push_back(std::move(task));
  }
  not_empty_.notify_one();
  return true;
}

bool Shard::PostTick() {
  return Post([this](ShardState&) { Tick(); });
}

void Shard::CloseInput(std::optional<std::chrono::steady_clock::time_point> deadline) {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    input_closed_ = true;
    if (deadline) drain_deadline_ = deadline;
  }
  not_empty_.notify_all();
  not_full_.notify_all();
}

void Shard::Join() {
  if (thread_.joinable()) thread_.join();
}

std::uint64_t Shard::WalDoneThrough() const {
  std::lock_guard<std::mutex> lock(mutex_);
  if (in_hand_ != 0) return in_hand_ - 1;
  if (!batches_.empty() && batches_.front().wal_sequence != 0) {
    return batches_.front().wal_sequence - 1;
  }
  // Nothing queued: every batch logged so far is in the state (a later
  // batch for this shard is logged under this lock, after this answer).
  return options_.wal ? options_.wal->next_sequence() - 1 : 0;
}

std::size_t Shard::queue_depth() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return batches_.size();
}

void Shard::Run() {
  const auto tick = std::chrono::microseconds(options_.tick);
  while (true) {
    std::deque<std::function<void(ShardState&)>> tasks;
    std::optional<ReadingBatch> batch;
    std::deque<ReadingBatch> dropped;
    bool finish = false;
    std::size_t depth = 0;
    {
      std::unique_lock<std::mutex> lock(mutex_);
      not_empty_.wait_for(lock, tick, [this] {
        return !tasks_.empty() || !batches_.empty() || input_closed_;
      });
      tasks.swap(tasks_);
      in_hand_ = 0;
      if (input_closed_ && drain_deadline_ && !batches_.empty() &&
          std::chrono::steady_clock::now() >= *drain_deadline_) {
        dropped.swap(batches_);
      }
      if (!batches_.empty()) {
        batch.emplace(std::move(batches_.front()));
        in_hand_ = batch->wal_sequence;
        batches_.pop_front();
      }
      depth = batches_.size();
      if (input_closed_ && batches_.empty() && tasks.empty() && !batch) {
        finish = true;
        stopped_ = true;  // later Posts are refused; nothing is left queued
      }
    }
    if (batch) {
      not_full_.notify_one();
      if (observer_) observer_->OnQueueDepth(index_, depth);
    }
    if (!dropped.empty()) {
      not_full_.notify_all();
      std::size_t readings = 0;
      for (ReadingBatch& b : dropped) {
        readings += b.size();
        if (b.ticket) b.ticket->BatchDone(0, b.size(), {});
      }
      LogWarning(
          "shutdown deadline passed: readings still queued are dropped",
          {{"shard", index_}, {"batches", dropped.size()}, {"readings", readings}});
    }
    for (auto& task : tasks) task(state_);
    if (batch) Process(*batch);
    if (clock_->Now() - last_tick_ >= options_.tick) Tick();
    if (finish) {
      state_.engine_->Finish(&out_);
      Publish();
      return;
    }
    Publish();
  }
}

void Shard::Process(ReadingBatch& batch) {
  Engine& engine = *state_.engine_;
  const EventTime arrived = clock_->Now();
  std::uint64_t counts[5] = {};  // index: IngestOutcome
  std::vector<IngestTicket::Refusal> refusals;
  const std::size_t series_before = engine.series_count();
  for (std::size_t k = 0; k < batch.entries.size(); ++k) {
    const ReadingBatch::Entry& entry = batch.entries[k];
    const std::string_view name = batch.name(entry);
    engine.PrefetchAhead([&](std::size_t n) -> std::optional<Engine::NameAndTime> {
      if (k + n >= batch.entries.size()) return std::nullopt;
      const ReadingBatch::Entry& ahead = batch.entries[k + n];
      return Engine::NameAndTime{batch.name(ahead), ahead.time};
    });
    const TraceBefore trace =
        options_.recent_points > 0 ? TraceStateBefore(engine.Find(name)) : TraceBefore{};
    const IngestOutcome outcome = engine.Ingest(name, entry.time, entry.value, &out_);
    ++counts[static_cast<int>(outcome)];
    if (outcome != IngestOutcome::kAccepted) {
      if (batch.ticket && refusals.size() < IngestTicket::kMaxRefusals) {
        refusals.push_back({entry.line, std::string(ToString(outcome))});
      }
      continue;
    }
    auto it = state_.extras_.find(name);
    if (it == state_.extras_.end()) {
      it = state_.extras_.emplace(std::string(name), SeriesExtras{}).first;
      if (observer_) observer_->OnNewSeries(index_, name);
    }
    SeriesExtras& extras = it->second;
    ++extras.readings;
    extras.last_time = entry.time;
    extras.last_value = entry.value;
    if (extras.readings == 1 || entry.time > extras.newest) extras.newest = entry.time;
    extras.arrived = arrived;
    state_.ScheduleSilence(it->first, &extras);
    if (options_.recent_points > 0) {
      // The forecast for this reading, as the model made it before the reading.
      extras.points.Push(
          TracePointAfter(engine.Find(name), trace, entry.time, entry.value),
          options_.recent_points);
    }
  }
  processed_.fetch_add(batch.size());
  if (observer_) {
    for (int i = 0; i < 5; ++i) {
      if (counts[i] > 0) observer_->OnOutcome(static_cast<IngestOutcome>(i), counts[i]);
    }
    const double seconds =
        std::chrono::duration<double>(std::chrono::steady_clock::now() - batch.handed_at)
            .count();
    observer_->OnBatchLatency(seconds);
  }
  if (engine.series_count() != series_before) {
    series_count_.store(engine.series_count());
    if (observer_) observer_->OnSeriesCount(index_, engine.series_count());
  }
  if (batch.ticket) {
    const std::uint64_t accepted = counts[static_cast<int>(IngestOutcome::kAccepted)];
    batch.ticket->BatchDone(accepted, batch.size() - accepted, refusals);
  }
}

void Shard::Tick() {
  last_tick_ = clock_->Now();
  state_.CheckSilences(last_tick_, &out_);
}

void Shard::Publish() {
  if (out_.empty()) return;
  for (const Alert& alert : out_) {
    auto it = state_.extras_.find(alert.series);
    if (it == state_.extras_.end()) continue;
    it->second.Note(alert);
    if (options_.recent_alerts == 0) continue;
    std::vector<Alert>& recent = it->second.alerts;
    if (recent.size() >= options_.recent_alerts) recent.erase(recent.begin());
    recent.push_back(alert);
  }
  if (publisher_) {
    publisher_->Publish(index_, &out_);
  }
  out_.clear();
}

ShardSet::ShardSet(std::size_t count, const Config& config, const ShardOptions& options,
                   const Clock* clock, AlertPublisher* publisher,
                   PipelineObserver* observer)
    : groups_(config) {
  for (std::size_t i = 0; i < std::max<std::size_t>(count, 1); ++i) {
    shards_.push_back(
        std::make_unique<Shard>(i, config, options, clock, publisher, observer));
  }
}

void ShardSet::Start() {
  for (auto& shard : shards_) shard->Start();
}

std::size_t ShardSet::ShardFor(std::string_view series) const {
  return static_cast<std::size_t>(groups_.RouteHash(series) % shards_.size());
}

void ShardSet::CloseAndJoin(
    std::optional<std::chrono::steady_clock::time_point> deadline) {
  for (auto& shard : shards_) shard->CloseInput(deadline);
  for (auto& shard : shards_) shard->Join();
}

ShardRouter::ShardRouter(ShardSet* shards, std::shared_ptr<IngestTicket> ticket,
                         std::shared_ptr<IngestLease> prepaid, std::string_view input)
    : shards_(shards),
      ticket_(std::move(ticket)),
      prepaid_(std::move(prepaid)),
      input_(input),
      batches_(shards->size()) {}

ShardRouter::~ShardRouter() { Flush(); }

bool ShardRouter::Add(const Reading& reading, std::uint64_t line) {
  if (closed_) return false;
  const std::size_t shard = shards_->ShardFor(reading.series);
  ReadingBatch& batch = batches_[shard];
  batch.Add(reading, line);
  ++routed_;
  if (batch.full()) return PushBatch(shard);
  return true;
}

bool ShardRouter::Flush() {
  bool ok = true;
  for (std::size_t i = 0; i < batches_.size(); ++i) {
    if (!batches_[i].empty()) ok = PushBatch(i) && ok;
  }
  return ok;
}

bool ShardRouter::PushBatch(std::size_t shard) {
  ReadingBatch& batch = batches_[shard];
  if (closed_) {
    batch = ReadingBatch();
    return false;
  }
  if (ticket_) {
    batch.ticket = ticket_;
    ticket_->AddBatch();
  }
  if (prepaid_) {
    batch.lease = prepaid_;
  } else if (IngestBudget* budget = shards_->budget()) {
    const std::size_t bytes = batch.MemoryBytes();
    budget->Acquire(bytes, input_);  // reads pause here while the budget is full
    batch.lease = std::make_shared<IngestLease>(budget, bytes);
  }
  batch.stream = stream_;
  if (!shards_->shard(shard).Push(&batch)) {
    closed_ = true;
    if (ticket_) ticket_->BatchDone(0, batch.size(), {});
    batch = ReadingBatch();
    return false;
  }
  last_wal_sequence_ = std::max(last_wal_sequence_, batch.wal_sequence);
  // Push moved the batch out; reuse nothing from it (its buffers went along).
  batch = ReadingBatch();
  batch.entries.reserve(kMaxBatchReadings);
  return true;
}

}  // namespace plumbline
