// KafkaInput: readings from a Kafka topic, shared among Plumbline instances
// through a consumer group (librdkafka). Each instance consumes the partitions
// the group assigns it; every reading of a series must come through one
// partition, which producers get by keying each message with the series name.
//
// Message: key = series name; value = a bare number (the reading at the
// message's timestamp) or reading lines (DESIGN.md "Readings") whose series
// must equal the key (others are refused: they would be watched by whichever
// instance owns the partition they landed in).
//
// Partition state. What the instance knows of a partition's series lives with
// the consumed offset, as one record per partition in a PartitionStateStore
// that every instance reads: a compacted Kafka topic (key
// "<group>/<topic>/<partition>") or a shared directory. The record is the
// checkpoint format (daemon/checkpoint.h: framed, CRC-32C) whose head names
// the partition as a stream with its next offset, and whose series are those
// seen in the partition. It is written
//   - every checkpoint_every, for the partitions read since the last one;
//   - when the group takes partitions away (a rebalance: an instance joined,
//     left or died), before the instance lets them go.
// Writing one: hand the routed readings to the shards and wait until they are
// judged, take the series' state on their shards, wait until the alerts they
// raised have left every sink (AlertDispatcher::Flush), then store the state
// with the offset after the last reading in it. When the group assigns a
// partition, its record is loaded, the series restored into the shards, and
// consumption resumes at its offset (no record: from the start or the end of
// the partition, per start_at). The series of revoked partitions are
// forgotten.
//
// When an instance dies, its partitions move after session_timeout; their new
// owner resumes from the last record (at most checkpoint_every old), so the
// readings after it are judged again with the same state: their alerts come
// again with the same stable ids (duplicates a consumer can drop by id),
// and none is lost, because a record is written only after its alerts left.
//
// Covariates (detectors/covariate.h). A covariate's recent observations are
// part of its series record, so they move with its partition. Within an
// instance a series and its covariates share a shard (daemon/covariate_groups.h)
// whatever partitions they come from; but the join follows arrival order, which
// across partitions is the consumer's interleaving, and an instance that does
// not own the covariate's partition never sees it (the series then reads the
// covariate's mean). Producing a covariate to the partition of the series that
// reads it keeps the join deterministic and on one instance.
//
// Thread-safety: Start and Stop from one controlling thread; the counters from
// any. The consumer and its rebalances run on the input's own thread.
#pragma once

#include <atomic>
#include <cstdint>
#include <functional>
#include <map>
#include <memory>
#include <string>
#include <thread>
#include <unordered_set>
#include <vector>

#include "config/stream_options.h"
#include "daemon/file_system.h"
#include "daemon/pipeline_observer.h"
#include "daemon/shard.h"
#include "detectors/status.h"

// The C libraries' handles (their headers stay in the .cc files).
struct rd_kafka_s;
struct rd_kafka_topic_partition_list_s;
struct rd_kafka_message_s;

namespace plumbline {

// Where partition records live. Used by one thread at a time.
class PartitionStateStore {
 public:
  virtual ~PartitionStateStore() = default;
  // The newest record of each of `partitions` that has one (absent: none).
  virtual StatusOr<std::map<std::int32_t, std::string>> Load(
      const std::vector<std::int32_t>& partitions) = 0;
  // Stores the records durably (all, or an error).
  virtual Status Save(const std::map<std::int32_t, std::string>& records) = 0;
};

// Files <directory>/<group>.<topic>.<partition>.plp, each replaced atomically.
std::unique_ptr<PartitionStateStore> MakeDirectoryStateStore(std::string directory,
                                                             std::string group,
                                                             std::string topic,
                                                             FileSystem* file_system);
// Messages keyed "<group>/<topic>/<partition>" on `state_topic` (which should
// be compacted: cleanup.policy=compact, and take messages as large as a
// partition's state: max.message.bytes). Written by an idempotent producer
// with acks from all replicas; read from the start to the end each Load.
StatusOr<std::unique_ptr<PartitionStateStore>> MakeKafkaStateStore(
    const std::string& brokers, std::string state_topic, std::string group,
    std::string topic);

// A partition record: the series (CheckpointSeries records, as
// ShardState::SaveNamedSeries writes them; `count` of them) and the offset to
// resume from.
std::string EncodePartitionState(const std::string& topic, std::int32_t partition,
                                 std::int64_t next_offset, std::string_view records,
                                 std::uint64_t count);
struct PartitionState {
  std::int64_t next_offset = 0;
  std::vector<struct CheckpointSeries> series;
};
// The records' engine states view `record`, which must outlive them.
StatusOr<PartitionState> DecodePartitionState(std::string_view record,
                                              const std::string& topic,
                                              std::int32_t partition);

class KafkaInput {
 public:
  // Bad messages logged per input, then only counted.
  static constexpr int kLoggedRejections = 5;

  // `shards`, `file_system` and `observer` (may be null) must outlive it.
  // `flush_alerts` waits until the alerts raised so far left every sink
  // (AlertDispatcher::Flush). `max_time_ahead`: readings later than the wall
  // clock plus this are refused.
  KafkaInput(KafkaInputOptions options, ShardSet* shards,
             std::function<bool(std::chrono::steady_clock::time_point)> flush_alerts,
             EventTime max_time_ahead, FileSystem* file_system,
             PipelineObserver* observer);
  ~KafkaInput();  // stops

  // Creates the consumer and the state store and starts the thread (which
  // joins the group). InvalidArgument when librdkafka refuses a setting.
  Status Start();
  // Leaves the group (its partitions' state saved on the way out) and joins
  // the thread.
  void Stop();

  // False with the reason while partition state could not be saved or
  // loaded (sticky: the first failure).
  bool Healthy(std::string* why) const;

  std::uint64_t readings() const { return readings_.load(); }
  std::uint64_t rejected() const { return rejected_.load(); }
  std::uint64_t restored_series() const { return restored_series_.load(); }
  std::size_t partitions() const { return partition_count_.load(); }

 private:
  struct Owned {
    std::int64_t next_offset = -1;   // after the last message routed; -1: none yet
    std::int64_t saved_offset = -1;  // in the store
    std::unordered_set<std::string> series;
  };
  void Run();
  friend struct KafkaCallbacks;  // librdkafka's callbacks (kafka_input.cc)
  void Assign(::rd_kafka_topic_partition_list_s* partitions);
  void Revoke(::rd_kafka_topic_partition_list_s* partitions);
  void Route(const ::rd_kafka_message_s& message);
  // Saves those of `partitions` whose offset moved since their last record.
  Status SavePartitions(const std::vector<std::int32_t>& partitions);
  // Commits the offsets of the records saved to the group (for lag
  // monitoring: consumption resumes from the records' offsets).
  void CommitOffsets();
  void Fail(const Status& status);
  void Refuse(std::string_view reason, std::string_view detail);

  const KafkaInputOptions options_;
  ShardSet* const shards_;
  const std::function<bool(std::chrono::steady_clock::time_point)> flush_alerts_;
  const EventTime max_time_ahead_;
  FileSystem* const file_system_;
  PipelineObserver* const observer_;

  ::rd_kafka_s* consumer_ = nullptr;
  std::unique_ptr<PartitionStateStore> store_;
  std::atomic<bool> stop_{false};
  std::thread thread_;

  // Input thread only:
  std::map<std::int32_t, Owned> owned_;
  std::shared_ptr<IngestTicket> ticket_;
  std::unique_ptr<ShardRouter> router_;
  std::unique_ptr<class ReadingParser> parser_;
  std::string_view key_;  // of the message being parsed
  std::uint64_t logged_rejections_ = 0;

  mutable std::mutex mutex_;  // guards failure_
  Status failure_;

  std::atomic<std::uint64_t> readings_{0};
  std::atomic<std::uint64_t> rejected_{0};
  std::atomic<std::uint64_t> restored_series_{0};
  std::atomic<std::size_t> partition_count_{0};
};

}  // namespace plumbline
