// Service's durable state: restore at start (the newest good checkpoint, then
// the write-ahead log's tail), a checkpoint every checkpoint_every, and a last
// one at shutdown. daemon/checkpoint.h and daemon/write_ahead_log.h have the
// formats.
#include <algorithm>
#include <chrono>
#include <future>
#include <memory>
#include <string>
#include <unordered_map>
#include <utility>
#include <vector>

#include "daemon/log.h"
#include "daemon/service.h"

namespace plumbline {
namespace {

// A shard's answer to a checkpoint: its series records and their count.
struct ShardPart {
  std::vector<std::string> records;  // ShardState::SaveSeries's pieces
  std::uint64_t count = 0;
  std::uint64_t wal_done = 0;
};

// How long one shard may take to write or restore its series, and the log
// to make a checkpoint's claims durable.
constexpr std::chrono::seconds kShardCheckpointWait{600};

double SecondsSince(std::chrono::steady_clock::time_point begun) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - begun).count();
}

}  // namespace

Status Service::StartCheckpoints() {
  const ServiceOptions& options = config_.service;
  if (options.checkpoint_every == 0) return Status::Ok();
  auto store = std::make_unique<CheckpointStore>(options.state_directory, deps_.file_system);
  const auto begun = std::chrono::steady_clock::now();
  std::vector<std::string> skipped;
  auto loaded = store->Load(&skipped);
  for (const std::string& why : skipped) LogWarning("checkpoint skipped", {{"reason", why}});
  if (!loaded.ok() && loaded.status().code() != Status::Code::kNotFound) {
    return loaded.status();  // another format version: refused, never overwritten
  }
  // The records view the mapped file, which the shards' tasks hold until the
  // last record is restored (a task may outlive a timed-out wait below).
  std::shared_ptr<const CheckpointStore::Loaded> file;
  const bool restoring = loaded.ok();
  Checkpoint checkpoint;
  if (restoring) {
    file = std::make_shared<const CheckpointStore::Loaded>(std::move(loaded).value());
    auto parsed = ParseCheckpointPayload(file->payload, store->format_version());
    if (!parsed.ok()) {
      // The checksum held, so this is a bug or a foreign writer, not a torn file.
      return Status::Corruption("checkpoint in " + options.state_directory + ": " +
                                parsed.status().message());
    }
    checkpoint = std::move(parsed).value();
  }
  const std::size_t payload_bytes = file ? file->payload.size() : 0;
  // Series from the checkpoint, to their shards.
  auto records = std::make_shared<std::vector<CheckpointSeries>>(std::move(checkpoint.series));
  std::unordered_map<std::string_view, std::uint64_t> wal_done;  // per restored series
  std::vector<std::vector<std::size_t>> by_shard(shards_->size());
  for (std::size_t i = 0; i < records->size(); ++i) {
    by_shard[shards_->ShardFor((*records)[i].name)].push_back(i);
    wal_done[(*records)[i].name] = (*records)[i].wal_done;
  }
  // Every shard restores its series at the same time, each record's
  // covariate observations freed once its monitor is built.
  using Part = std::pair<ReconfigureReport, std::size_t>;  // and the refused
  std::vector<std::future<Part>> parts;
  const EventTime now = deps_.clock->Now();
  for (std::size_t shard = 0; shard < shards_->size() && !records->empty(); ++shard) {
    auto part = shards_->shard(shard).AskLater<Part>(
        [records, file, indices = std::move(by_shard[shard]), now](ShardState& state) {
          Part part;
          for (std::size_t i : indices) {
            CheckpointSeries& record = (*records)[i];
            const Status status = state.RestoreSeries(record, now, &part.first);
            if (!status.ok()) {
              ++part.second;
              LogWarning("series not restored",
                         {{"series", record.name}, {"reason", status.message()}});
            }
            record.engine_state = {};
            std::vector<CovariateObservation>().swap(record.covariate_history);
          }
          return part;
        });
    if (!part) return Status::Unavailable("a shard stopped before restoring its series");
    parts.push_back(std::move(*part));
  }
  ReconfigureReport total;
  std::size_t refused = 0;
  const auto restore_deadline = std::chrono::steady_clock::now() + kShardCheckpointWait;
  for (std::future<Part>& part : parts) {
    if (part.wait_until(restore_deadline) != std::future_status::ready) {
      return Status::Unavailable("a shard did not restore its series in time");
    }
    const Part answer = part.get();
    total.kept += answer.first.kept;
    total.retuned += answer.first.retuned;
    total.restarted += answer.first.restarted;
    total.dropped += answer.first.dropped;
    refused += answer.second;
  }
  file.reset();  // every record is restored: the checkpoint is unmapped
  if (restoring) {
    LogInfo("checkpoint restored", {{"generation", store->generation()},
                                    {"series", records->size()},
                                    {"kept", total.kept},
                                    {"retuned", total.retuned},
                                    {"restarted", total.restarted},
                                    {"dropped", total.dropped},
                                    {"refused", refused},
                                    {"bytes", payload_bytes},
                                    {"seconds", SecondsSince(begun)}});
  }
  // The log's tail: every record after the checkpoint, in order. A stream's
  // batches count once a mark of the same connection follows them; those
  // followed by a resume or by nothing were never acknowledged (the sender
  // sends them again), so they are left out.
  const auto replay_begun = std::chrono::steady_clock::now();
  std::unordered_map<std::string, std::uint64_t> streams(checkpoint.head.streams.begin(),
                                                         checkpoint.head.streams.end());
  wal_->SetStreams(streams);
  std::vector<WalRecord> tail;
  std::vector<std::string> problems;
  if (Status status =
          wal_->Replay([&](const WalRecord& record) { tail.push_back(record); },
                       &problems, checkpoint.head.wal_done);
      !status.ok()) {
    return status;
  }
  std::vector<bool> unacknowledged(tail.size(), false);
  std::unordered_map<std::string_view, std::vector<std::size_t>> waiting;  // per stream
  for (std::size_t i = 0; i < tail.size(); ++i) {
    if (tail[i].stream.empty()) continue;
    std::vector<std::size_t>& batches = waiting[tail[i].stream];
    if (tail[i].type == WalRecord::Type::kBatch) {
      batches.push_back(i);
      continue;
    }
    if (tail[i].type == WalRecord::Type::kResume) {
      for (std::size_t j : batches) unacknowledged[j] = true;
    }
    batches.clear();
  }
  for (const auto& [stream, batches] : waiting) {
    for (std::size_t j : batches) unacknowledged[j] = true;
  }
  for (const std::string& why : problems) LogWarning("write-ahead log record skipped", {{"reason", why}});
  std::uint64_t replayed = 0, skipped_readings = 0;
  std::vector<ReadingBatch> batches(shards_->size());
  auto push = [&](std::size_t shard) {
    batches[shard].replayed = true;
    shards_->shard(shard).Push(&batches[shard]);
    batches[shard] = ReadingBatch();
  };
  for (std::size_t i = 0; i < tail.size(); ++i) {
    const WalRecord& record = tail[i];
    if (unacknowledged[i]) {
      skipped_readings += record.readings.size();
      continue;
    }
    for (const WalRecord::Reading& r : record.readings) {
      auto done = wal_done.find(r.series);
      if (done != wal_done.end() && done->second >= record.sequence) continue;
      const std::size_t shard = shards_->ShardFor(r.series);
      batches[shard].Add(Reading{r.time, r.series, r.value}, 0);
      ++replayed;
      if (batches[shard].full()) push(shard);
    }
  }
  for (std::size_t shard = 0; shard < batches.size(); ++shard) {
    if (!batches[shard].empty()) push(shard);
  }
  // Wait until the shards hold all of it (a task runs after every batch
  // queued before it once the queue is empty).
  for (std::size_t shard = 0; shard < shards_->size(); ++shard) {
    while (shards_->shard(shard).queue_depth() > 0) {
      std::this_thread::sleep_for(std::chrono::milliseconds(2));
    }
    (void)shards_->shard(shard).Ask<bool>([](ShardState&) { return true; },
                                         kShardCheckpointWait);
  }
  if (!tail.empty() || replayed > 0) {
    LogInfo("write-ahead log replayed", {{"records", tail.size()},
                                         {"readings", replayed},
                                         {"unacknowledged_readings", skipped_readings},
                                         {"seconds", SecondsSince(replay_begun)}});
  }
  if (Status status = wal_->Start(checkpoint.head.wal_next); !status.ok()) return status;
  older_wal_done_ = checkpoint.head.wal_done;
  checkpoints_ = std::move(store);
  checkpoint_thread_ = std::thread([this, every = options.checkpoint_every] {
    std::unique_lock<std::mutex> lock(checkpoint_mutex_);
    while (!checkpoint_stop_) {
      if (checkpoint_wake_.wait_for(lock, std::chrono::microseconds(every),
                                    [this] { return checkpoint_stop_; })) {
        break;
      }
      lock.unlock();
      const Status status = SaveCheckpoint();
      lock.lock();
      if (!status.ok() && checkpoint_failure_.ok()) checkpoint_failure_ = status;
    }
  });
  return Status::Ok();
}

Status Service::SaveCheckpoint() {
  const auto begun = std::chrono::steady_clock::now();
  wal_->Rotate();  // later records go to a new segment; older ones can be deleted
  std::uint64_t series = 0;
  CheckpointHead head;
  head.wal_done = UINT64_MAX;
  // The payload in pieces: its head first (filled in below), then each
  // shard's records. The shards write theirs at the same time.
  std::vector<std::string> parts(1);
  std::unique_lock<std::shared_mutex> gate(wal_->stream_gate());
  std::vector<std::future<ShardPart>> answers;
  for (std::size_t i = 0; i < shards_->size(); ++i) {
    Shard& shard = shards_->shard(i);
    auto answer = shard.AskLater<ShardPart>([&shard](ShardState& state) {
      ShardPart p;
      p.wal_done = shard.WalDoneThrough();
      state.SaveSeries(p.wal_done, &p.records, &p.count);
      return p;
    });
    if (!answer) return Status::Unavailable("a shard stopped before writing its series");
    answers.push_back(std::move(*answer));
  }
  const auto deadline = std::chrono::steady_clock::now() + kShardCheckpointWait;
  for (std::future<ShardPart>& answer : answers) {
    if (answer.wait_until(deadline) != std::future_status::ready) {
      return Status::Unavailable("a shard did not write its series in time");
    }
    ShardPart part = answer.get();
    series += part.count;
    head.wal_done = std::min(head.wal_done, part.wal_done);
    for (std::string& piece : part.records) parts.push_back(std::move(piece));
  }
  // The stream table claims lines durable: everything it counts must be in
  // the log on disk before the checkpoint says so.
  std::uint64_t through = 0;
  for (auto& entry : wal_->Streams(&through)) head.streams.emplace_back(entry);
  gate.unlock();
  head.wal_next = through + 1;
  if (!wal_->WaitDurable(through, kShardCheckpointWait)) {
    return Status::IoError("write-ahead log not durable: " + wal_->failure().message());
  }
  // The series' state includes the alerts they raised; a restart replays only
  // the log after this checkpoint, so those alerts must be in the alert log
  // before the checkpoint says they happened.
  if (!dispatcher_->Flush(std::chrono::steady_clock::now() + kShardCheckpointWait)) {
    return Status::Unavailable("alerts not delivered in time for the checkpoint");
  }
  parts[0] = CheckpointPayloadHead(head, series);
  std::size_t payload_bytes = 0;
  for (const std::string& part : parts) payload_bytes += part.size();
  const double snapshot_seconds = SecondsSince(begun);
  Status status = checkpoints_->Save(&parts);
  if (!status.ok()) {
    LogError("checkpoint failed", {{"reason", status.message()}});
    return status;
  }
  // The older checkpoint on disk still needs the log after its position.
  wal_->DeleteThrough(older_wal_done_);
  older_wal_done_ = head.wal_done;
  LogInfo("checkpoint saved", {{"generation", checkpoints_->generation()},
                               {"series", series},
                               {"bytes", payload_bytes},
                               {"snapshot_seconds", snapshot_seconds},
                               {"seconds", SecondsSince(begun)},
                               {"wal_bytes", wal_->bytes_written()},
                               {"wal_syncs", wal_->syncs()}});
  return Status::Ok();
}

void Service::StopCheckpoints(std::chrono::steady_clock::time_point deadline) {
  if (!checkpoints_) return;
  {
    std::lock_guard<std::mutex> lock(checkpoint_mutex_);
    checkpoint_stop_ = true;
  }
  checkpoint_wake_.notify_all();
  if (checkpoint_thread_.joinable()) checkpoint_thread_.join();
  // The inputs have stopped: once every queued batch is processed, the state
  // is complete (and the log holds whatever is not).
  for (std::size_t shard = 0; shard < shards_->size(); ++shard) {
    while (shards_->shard(shard).queue_depth() > 0 &&
           std::chrono::steady_clock::now() < deadline) {
      std::this_thread::sleep_for(std::chrono::milliseconds(5));
    }
  }
  if (std::chrono::steady_clock::now() < deadline) {
    if (Status status = SaveCheckpoint(); !status.ok()) {
      std::lock_guard<std::mutex> lock(checkpoint_mutex_);
      if (checkpoint_failure_.ok()) checkpoint_failure_ = status;
    }
  } else {
    LogWarning("no checkpoint at shutdown: the shard queues did not drain in time; the "
               "write-ahead log keeps what the last checkpoint lacks");
  }
  wal_->Stop();
}

}  // namespace plumbline
