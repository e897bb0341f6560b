#include "daemon/kafka_input.h"

#include <fcntl.h>
#include <librdkafka/rdkafka.h>
#include <unistd.h>

#include <cerrno>
#include <cstring>
#include <initializer_list>

#include "daemon/checkpoint.h"
#include "daemon/clock.h"
#include "daemon/log.h"
#include "daemon/message_payload.h"
#include "daemon/reading_parser.h"

namespace plumbline {

using SteadyTime = std::chrono::steady_clock::time_point;

namespace {

// How long one consumer poll waits for a message (and so how soon Stop is seen).
constexpr int kPollMilliseconds = 100;
// Routed readings are handed to the shards at least this often.
constexpr std::chrono::milliseconds kHandOverEvery{50};
// One load or save of partition state, and the alerts' flush before a save.
constexpr std::chrono::seconds kStoreTimeout{30};
// The shards judging every routed reading before a save.
constexpr std::chrono::seconds kDrainWait{600};
// Largest partition record the Kafka state store writes and reads.
constexpr int kMaxRecordBytes = 256 << 20;

double SecondsSince(SteadyTime begun) {
  return std::chrono::duration<double>(std::chrono::steady_clock::now() - begun).count();
}

int Milliseconds(std::chrono::steady_clock::duration d) {
  return static_cast<int>(
      std::chrono::duration_cast<std::chrono::milliseconds>(d).count());
}

// Applies librdkafka settings to `conf`; InvalidArgument naming the first it refuses.
Status Configure(rd_kafka_conf_t* conf,
                 std::initializer_list<std::pair<const char*, std::string>> settings) {
  char error[512];
  for (const auto& [name, value] : settings) {
    if (rd_kafka_conf_set(conf, name, value.c_str(), error, sizeof error) !=
        RD_KAFKA_CONF_OK) {
      return Status::InvalidArgument(std::string("kafka setting ") + name + ": " + error);
    }
  }
  return Status::Ok();
}

// A client from `conf` (which it takes, also on failure).
StatusOr<rd_kafka_t*> NewClient(rd_kafka_type_t type, rd_kafka_conf_t* conf) {
  char error[512];
  rd_kafka_t* client = rd_kafka_new(type, conf, error, sizeof error);
  if (!client) {
    rd_kafka_conf_destroy(conf);
    return Status::InvalidArgument(std::string("kafka client: ") + error);
  }
  return client;
}

std::string PartitionKey(const std::string& group, const std::string& topic,
                         std::int32_t partition) {
  return group + "/" + topic + "/" + std::to_string(partition);
}

// The stream a record's head names: the topic and the partition.
std::string StreamName(const std::string& topic, std::int32_t partition) {
  return "kafka:" + topic + "/" + std::to_string(partition);
}

class DirectoryStateStore : public PartitionStateStore {
 public:
  DirectoryStateStore(std::string directory, std::string group, std::string topic,
                      FileSystem* file_system)
      : directory_(std::move(directory)),
        prefix_(Safe(group) + "." + Safe(topic) + "."),
        file_system_(file_system) {}

  StatusOr<std::map<std::int32_t, std::string>> Load(
      const std::vector<std::int32_t>& partitions) override {
    std::map<std::int32_t, std::string> records;
    for (std::int32_t partition : partitions) {
      const std::string path = Path(partition);
      const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
      if (fd < 0) {
        if (errno == ENOENT) continue;
        return Status::IoError("cannot open " + path + ": " + std::strerror(errno));
      }
      std::string contents;
      char buffer[1 << 16];
      ssize_t n = 0;
      while ((n = ::read(fd, buffer, sizeof buffer)) != 0) {
        if (n < 0 && errno == EINTR) continue;
        if (n < 0) {
          const int error = errno;
          ::close(fd);
          return Status::IoError("cannot read " + path + ": " + std::strerror(error));
        }
        contents.append(buffer, static_cast<std::size_t>(n));
      }
      ::close(fd);
      records.emplace(partition, std::move(contents));
    }
    return records;
  }

  Status Save(const std::map<std::int32_t, std::string>& records) override {
    if (Status status = file_system_->CreateDirectories(directory_); !status.ok()) {
      return status;
    }
    for (const auto& [partition, record] : records) {
      if (Status status = file_system_->ReplaceFile(Path(partition), record);
          !status.ok()) {
        return status;
      }
    }
    return Status::Ok();
  }

 private:
  static std::string Safe(std::string text) {
    for (char& c : text) {
      if (c == '/') c = '_';
    }
    return text;
  }
  std::string Path(std::int32_t partition) const {
    return directory_ + "/" + prefix_ + std::to_string(partition) + ".plp";
  }

  const std::string directory_;
  const std::string prefix_;
  FileSystem* const file_system_;
};

class KafkaStateStore : public PartitionStateStore {
 public:
  KafkaStateStore(rd_kafka_t* producer, rd_kafka_t* reader, std::string state_topic,
                  std::string group, std::string topic)
      : producer_(producer),
        reader_(reader),
        state_topic_(std::move(state_topic)),
        group_(std::move(group)),
        topic_(std::move(topic)) {}
  ~KafkaStateStore() override {
    rd_kafka_flush(producer_, Milliseconds(kStoreTimeout));
    rd_kafka_destroy(producer_);
    rd_kafka_consumer_close(reader_);
    rd_kafka_destroy(reader_);
  }

  // Delivery reports of the producer (on the thread that flushes).
  static void OnDelivery(rd_kafka_t*, const rd_kafka_message_t* message, void* opaque) {
    auto* store = static_cast<KafkaStateStore*>(opaque);
    if (message->err && store->delivery_error_.empty()) {
      store->delivery_error_ = rd_kafka_err2str(message->err);
    }
  }

  StatusOr<std::map<std::int32_t, std::string>> Load(
      const std::vector<std::int32_t>& partitions) override {
    const SteadyTime deadline = std::chrono::steady_clock::now() + kStoreTimeout;
    std::map<std::string, std::int32_t> wanted;
    for (std::int32_t p : partitions) wanted[PartitionKey(group_, topic_, p)] = p;
    std::map<std::int32_t, std::string> records;
    if (wanted.empty()) return records;

    rd_kafka_topic_t* handle = rd_kafka_topic_new(reader_, state_topic_.c_str(), nullptr);
    const rd_kafka_metadata_t* metadata = nullptr;
    rd_kafka_resp_err_t error =
        rd_kafka_metadata(reader_, 0, handle, &metadata, Milliseconds(kStoreTimeout));
    rd_kafka_topic_destroy(handle);
    if (error) {
      return Status::Unavailable("state topic " + state_topic_ +
                                 ": metadata: " + rd_kafka_err2str(error));
    }
    int partition_count = 0;
    if (metadata->topic_cnt == 1) {
      error = metadata->topics[0].err;
      partition_count = metadata->topics[0].partition_cnt;
    }
    rd_kafka_metadata_destroy(metadata);
    if (error || partition_count == 0) {
      return Status::FailedPrecondition(
          "state topic " + state_topic_ + " is not there (" +
          (error ? rd_kafka_err2str(error) : "no partitions") +
          "): create it, compacted (cleanup.policy=compact)");
    }
    // Read every partition of the state topic from its start to its end.
    rd_kafka_topic_partition_list_t* list =
        rd_kafka_topic_partition_list_new(partition_count);
    std::map<std::int32_t, std::int64_t> end;  // partitions still to read, to their end
    for (std::int32_t p = 0; p < partition_count; ++p) {
      std::int64_t low = 0, high = 0;
      error = rd_kafka_query_watermark_offsets(reader_, state_topic_.c_str(), p, &low,
                                               &high, Milliseconds(kStoreTimeout));
      if (error) {
        rd_kafka_topic_partition_list_destroy(list);
        return Status::Unavailable("state topic " + state_topic_ +
                                   ": offsets: " + rd_kafka_err2str(error));
      }
      if (high <= low) continue;
      rd_kafka_topic_partition_list_add(list, state_topic_.c_str(), p)->offset = low;
      end[p] = high;
    }
    error = rd_kafka_assign(reader_, list);
    rd_kafka_topic_partition_list_destroy(list);
    if (error) {
      return Status::Unavailable("state topic " + state_topic_ +
                                 ": assign: " + rd_kafka_err2str(error));
    }
    Status status;
    while (!end.empty()) {
      if (std::chrono::steady_clock::now() > deadline) {
        status = Status::Unavailable("state topic " + state_topic_ + " not read within " +
                                     std::to_string(kStoreTimeout.count()) + " s");
        break;
      }
      rd_kafka_message_t* message = rd_kafka_consumer_poll(reader_, kPollMilliseconds);
      if (!message) continue;
      if (message->err) {
        if (message->err != RD_KAFKA_RESP_ERR__PARTITION_EOF) {
          status = Status::Unavailable("state topic " + state_topic_ + ": " +
                                       rd_kafka_message_errstr(message));
        }
        rd_kafka_message_destroy(message);
        if (!status.ok()) break;
        continue;
      }
      const std::string key(static_cast<const char*>(message->key), message->key_len);
      if (auto it = wanted.find(key); it != wanted.end()) {
        records[it->second].assign(static_cast<const char*>(message->payload),
                                   message->len);
      }
      auto it = end.find(message->partition);
      if (it != end.end() && message->offset + 1 >= it->second) end.erase(it);
      rd_kafka_message_destroy(message);
    }
    rd_kafka_assign(reader_, nullptr);
    if (!status.ok()) return status;
    return records;
  }

  Status Save(const std::map<std::int32_t, std::string>& records) override {
    delivery_error_.clear();
    for (const auto& [partition, record] : records) {
      const std::string key = PartitionKey(group_, topic_, partition);
      rd_kafka_resp_err_t error = RD_KAFKA_RESP_ERR_NO_ERROR;
      do {
        error = rd_kafka_producev(
            producer_, RD_KAFKA_V_TOPIC(state_topic_.c_str()),
            RD_KAFKA_V_KEY(key.data(), key.size()),
            RD_KAFKA_V_VALUE(const_cast<char*>(record.data()), record.size()),
            RD_KAFKA_V_MSGFLAGS(RD_KAFKA_MSG_F_COPY), RD_KAFKA_V_END);
        if (error == RD_KAFKA_RESP_ERR__QUEUE_FULL) rd_kafka_poll(producer_, 100);
      } while (error == RD_KAFKA_RESP_ERR__QUEUE_FULL);
      if (error) {
        return Status::IoError("state topic " + state_topic_ + ": " +
                               rd_kafka_err2str(error));
      }
    }
    rd_kafka_flush(producer_, Milliseconds(kStoreTimeout));
    if (rd_kafka_outq_len(producer_) > 0) {
      return Status::Unavailable("state topic " + state_topic_ +
                                 ": not acknowledged within " +
                                 std::to_string(kStoreTimeout.count()) + " s");
    }
    if (!delivery_error_.empty()) {
      return Status::IoError("state topic " + state_topic_ + ": " + delivery_error_);
    }
    return Status::Ok();
  }

 private:
  rd_kafka_t* const producer_;
  rd_kafka_t* const reader_;
  const std::string state_topic_;
  const std::string group_;
  const std::string topic_;
  std::string delivery_error_;  // the first failed delivery of a Save
};

}  // namespace

std::unique_ptr<PartitionStateStore> MakeDirectoryStateStore(std::string directory,
                                                             std::string group,
                                                             std::string topic,
                                                             FileSystem* file_system) {
  return std::make_unique<DirectoryStateStore>(std::move(directory), std::move(group),
                                               std::move(topic), file_system);
}

StatusOr<std::unique_ptr<PartitionStateStore>> MakeKafkaStateStore(
    const std::string& brokers, std::string state_topic, std::string group,
    std::string topic) {
  const std::string max_bytes = std::to_string(kMaxRecordBytes);
  rd_kafka_conf_t* producer_conf = rd_kafka_conf_new();
  if (Status status = Configure(producer_conf, {{"bootstrap.servers", brokers},
                                                {"client.id", "plumbline-state"},
                                                {"enable.idempotence", "true"},
                                                {"message.max.bytes", max_bytes}});
      !status.ok()) {
    rd_kafka_conf_destroy(producer_conf);
    return status;
  }
  rd_kafka_conf_t* reader_conf = rd_kafka_conf_new();
  if (Status status = Configure(reader_conf, {{"bootstrap.servers", brokers},
                                              {"client.id", "plumbline-state"},
                                              {"group.id", group + ".state-reader"},
                                              {"enable.auto.commit", "false"},
                                              {"enable.partition.eof", "false"},
                                              {"receive.message.max.bytes",
                                               std::to_string(kMaxRecordBytes + 65536)},
                                              {"fetch.max.bytes", max_bytes}});
      !status.ok()) {
    rd_kafka_conf_destroy(producer_conf);
    rd_kafka_conf_destroy(reader_conf);
    return status;
  }
  auto store_producer = NewClient(RD_KAFKA_PRODUCER, producer_conf);
  if (!store_producer.ok()) {
    rd_kafka_conf_destroy(reader_conf);
    return store_producer.status();
  }
  auto reader = NewClient(RD_KAFKA_CONSUMER, reader_conf);
  if (!reader.ok()) {
    rd_kafka_destroy(*store_producer);
    return reader.status();
  }
  rd_kafka_poll_set_consumer(*reader);
  auto store =
      std::make_unique<KafkaStateStore>(*store_producer, *reader, std::move(state_topic),
                                        std::move(group), std::move(topic));
  return std::unique_ptr<PartitionStateStore>(std::move(store));
}

std::string EncodePartitionState(const std::string& topic, std::int32_t partition,
                                 std::int64_t next_offset, std::string_view records,
                                 std::uint64_t count) {
  CheckpointHead head;
  head.streams.emplace_back(StreamName(topic, partition),
                            static_cast<std::uint64_t>(next_offset));
  std::string payload = CheckpointPayloadHead(head, count);
  payload.append(records);
  return FrameCheckpoint(payload, static_cast<std::uint64_t>(next_offset));
}

StatusOr<PartitionState> DecodePartitionState(std::string_view record,
                                              const std::string& topic,
                                              std::int32_t partition) {
  auto framed = UnframeCheckpoint(record);
  if (!framed.ok()) return framed.status();
  auto checkpoint = ParseCheckpointPayload(framed->payload, framed->version);
  if (!checkpoint.ok()) return checkpoint.status();
  const std::string stream = StreamName(topic, partition);
  if (checkpoint->head.streams.size() != 1 ||
      checkpoint->head.streams[0].first != stream) {
    return Status::Corruption("partition record not of " + stream);
  }
  PartitionState state;
  state.next_offset = static_cast<std::int64_t>(checkpoint->head.streams[0].second);
  state.series = std::move(checkpoint->series);
  return state;
}

// librdkafka's callbacks, on the input's thread (inside its polls).
struct KafkaCallbacks {
  static void Rebalance(rd_kafka_t*, rd_kafka_resp_err_t error,
                        rd_kafka_topic_partition_list_t* partitions, void* opaque) {
    auto* input = static_cast<KafkaInput*>(opaque);
    if (error == RD_KAFKA_RESP_ERR__ASSIGN_PARTITIONS) {
      input->Assign(partitions);
    } else {
      input->Revoke(partitions);
    }
  }
};

KafkaInput::KafkaInput(KafkaInputOptions options, ShardSet* shards,
                       std::function<bool(SteadyTime)> flush_alerts,
                       EventTime max_time_ahead, FileSystem* file_system,
                       PipelineObserver* observer)
    : options_(std::move(options)),
      shards_(shards),
      flush_alerts_(std::move(flush_alerts)),
      max_time_ahead_(max_time_ahead),
      file_system_(file_system),
      observer_(observer) {}

KafkaInput::~KafkaInput() { Stop(); }

Status KafkaInput::Start() {
  if (options_.state_topic.empty()) {
    store_ = MakeDirectoryStateStore(options_.state_directory, options_.group,
                                     options_.topic, file_system_);
  } else {
    auto store = MakeKafkaStateStore(options_.brokers, options_.state_topic,
                                     options_.group, options_.topic);
    if (!store.ok()) return store.status();
    store_ = std::move(store).value();
  }
  const auto session_ms = options_.session_timeout / 1000;
  rd_kafka_conf_t* conf = rd_kafka_conf_new();
  if (Status status = Configure(
          conf,
          {{"bootstrap.servers", options_.brokers},
           {"group.id", options_.group},
           {"client.id", "plumbline"},
           {"enable.auto.commit", "false"},
           {"enable.auto.offset.store", "false"},
           {"auto.offset.reset", options_.start_at_end ? "latest" : "earliest"},
           {"session.timeout.ms", std::to_string(session_ms)},
           {"heartbeat.interval.ms", std::to_string(std::max<long>(session_ms / 4, 100))},
           // Eager rebalances: every partition is let go (its state
           // saved) before any is assigned anew.
           {"partition.assignment.strategy", "range"}});
      !status.ok()) {
    rd_kafka_conf_destroy(conf);
    return status;
  }
  rd_kafka_conf_set_rebalance_cb(conf, &KafkaCallbacks::Rebalance);
  rd_kafka_conf_set_opaque(conf, this);
  auto consumer = NewClient(RD_KAFKA_CONSUMER, conf);
  if (!consumer.ok()) return consumer.status();
  consumer_ = *consumer;
  rd_kafka_poll_set_consumer(consumer_);
  rd_kafka_topic_partition_list_t* topics = rd_kafka_topic_partition_list_new(1);
  rd_kafka_topic_partition_list_add(topics, options_.topic.c_str(),
                                    RD_KAFKA_PARTITION_UA);
  const rd_kafka_resp_err_t error = rd_kafka_subscribe(consumer_, topics);
  rd_kafka_topic_partition_list_destroy(topics);
  if (error) {
    rd_kafka_destroy(consumer_);
    consumer_ = nullptr;
    return Status::InvalidArgument("kafka subscribe to " + options_.topic + ": " +
                                   rd_kafka_err2str(error));
  }

  ticket_ = std::make_shared<IngestTicket>();
  router_ = std::make_unique<ShardRouter>(shards_, ticket_, nullptr, "kafka");
  parser_ = std::make_unique<ReadingParser>(
      ReadingParserOptions{},
      [this](const Reading& reading) {
        if (reading.series != key_) {
          Refuse("series_not_key", reading.series);
          return;
        }
        router_->Add(reading, 0);
        readings_.fetch_add(1);
      },
      [this](std::uint64_t, ReadingError reason, std::string_view detail) {
        if (observer_) observer_->OnParseRejected(reason, 1);
        Refuse(ToString(reason), detail);
      });
  thread_ = std::thread([this] { Run(); });
  LogInfo("kafka input started", {{"brokers", options_.brokers},
                                  {"topic", options_.topic},
                                  {"group", options_.group}});
  return Status::Ok();
}

void KafkaInput::Stop() {
  stop_ = true;
  if (thread_.joinable()) thread_.join();
  if (consumer_) {
    rd_kafka_destroy(consumer_);
    consumer_ = nullptr;
  }
  store_.reset();
}

bool KafkaInput::Healthy(std::string* why) const {
  std::lock_guard<std::mutex> lock(mutex_);
  if (failure_.ok()) return true;
  if (why) *why = "kafka input: " + failure_.message();
  return false;
}

void KafkaInput::Fail(const Status& status) {
  LogError("kafka partition state", {{"error", status.message()}});
  std::lock_guard<std::mutex> lock(mutex_);
  if (failure_.ok()) failure_ = status;
}

void KafkaInput::Refuse(std::string_view reason, std::string_view detail) {
  rejected_.fetch_add(1);
  if (logged_rejections_++ < kLoggedRejections) {
    LogWarning("kafka message refused", {{"reason", reason}, {"detail", detail}});
  }
}

void KafkaInput::Run() {
  SteadyTime handed_over = std::chrono::steady_clock::now();
  SteadyTime saved = handed_over;
  const auto every = std::chrono::microseconds(options_.checkpoint_every);
  while (!stop_) {
    rd_kafka_message_t* message = rd_kafka_consumer_poll(consumer_, kPollMilliseconds);
    if (message) {
      if (!message->err) {
        Route(*message);
      } else if (message->err != RD_KAFKA_RESP_ERR__PARTITION_EOF) {
        LogWarning("kafka consumer", {{"error", rd_kafka_message_errstr(message)}});
      }
      rd_kafka_message_destroy(message);
    }
    const SteadyTime now = std::chrono::steady_clock::now();
    if (now - handed_over >= kHandOverEvery) {
      router_->Flush();
      handed_over = now;
    }
    if (now - saved >= every) {
      std::vector<std::int32_t> partitions;
      for (const auto& [partition, owned] : owned_) partitions.push_back(partition);
      if (Status status = SavePartitions(partitions); !status.ok()) Fail(status);
      CommitOffsets();
      saved = std::chrono::steady_clock::now();
    }
  }
  // Leaving the group revokes every partition (Revoke saves them).
  if (const rd_kafka_resp_err_t error = rd_kafka_consumer_close(consumer_); error) {
    LogWarning("kafka consumer close", {{"error", rd_kafka_err2str(error)}});
  }
  router_.reset();
  LogInfo("kafka input stopped",
          {{"readings", readings_.load()}, {"refused", rejected_.load()}});
}

void KafkaInput::Route(const rd_kafka_message_t& message) {
  auto owned = owned_.find(message.partition);
  if (owned == owned_.end()) return;  // let go already
  key_ = std::string_view(static_cast<const char*>(message.key), message.key_len);
  const std::string_view payload(static_cast<const char*>(message.payload), message.len);
  const EventTime latest = WallClockNow() + max_time_ahead_;
  if (double value = 0.0; BareNumber(payload, &value)) {
    const std::int64_t stamp = rd_kafka_message_timestamp(&message, nullptr);
    const EventTime time = stamp >= 0 ? stamp * 1000 : WallClockNow();
    ReadingError reason = ReadingError::kBadSeriesName;
    if (!IsValidSeriesName(key_, &reason)) {
      Refuse(ToString(reason), "message key");
    } else if (time > latest) {
      Refuse(ToString(ReadingError::kTimeInFuture), key_);
    } else {
      router_->Add(Reading{time, key_, value}, 0);
      readings_.fetch_add(1);
    }
  } else {
    parser_->set_latest_time(latest);
    parser_->Feed(payload);
    parser_->Finish();
  }
  Owned& state = owned->second;
  if (state.series.find(std::string(key_)) == state.series.end()) {
    state.series.emplace(key_);
  }
  state.next_offset = message.offset + 1;
}

Status KafkaInput::SavePartitions(const std::vector<std::int32_t>& partitions) {
  const SteadyTime begun = std::chrono::steady_clock::now();
  std::vector<std::int32_t> due;
  for (std::int32_t p : partitions) {
    auto it = owned_.find(p);
    if (it != owned_.end() && it->second.next_offset >= 0 &&
        it->second.next_offset != it->second.saved_offset) {
      due.push_back(p);
    }
  }
  if (due.empty()) return Status::Ok();
  // Every routed reading judged, so the series' state holds exactly the
  // readings before next_offset.
  router_->Flush();
  if (!ticket_->Wait(kDrainWait)) {
    return Status::Unavailable("the shards did not judge the routed readings in time");
  }
  // Each partition's series, by shard.
  const std::size_t shard_count = shards_->size();
  std::vector<std::vector<std::vector<std::string>>> names(
      shard_count, std::vector<std::vector<std::string>>(due.size()));
  for (std::size_t i = 0; i < due.size(); ++i) {
    for (const std::string& name : owned_[due[i]].series) {
      names[shards_->ShardFor(name)][i].push_back(name);
    }
  }
  std::vector<std::string> records(due.size());
  std::vector<std::uint64_t> counts(due.size(), 0);
  // Every shard writes its series at the same time. Each task owns its names:
  // one that outlives a timeout below must not point into this frame.
  using Part = std::vector<std::pair<std::string, std::uint64_t>>;
  std::vector<std::future<Part>> parts;
  for (std::size_t s = 0; s < shard_count; ++s) {
    // The answer comes after the shard published the alerts of every
    // reading judged before it.
    auto part =
        shards_->shard(s).AskLater<Part>([mine = std::move(names[s])](ShardState& state) {
          Part out;
          for (const std::vector<std::string>& partition_names : mine) {
            SnapshotWriter w;
            std::uint64_t count = 0;
            state.SaveNamedSeries(partition_names, &w, &count);
            out.emplace_back(w.Take(), count);
          }
          return out;
        });
    if (!part) return Status::Unavailable("a shard stopped before writing its series");
    parts.push_back(std::move(*part));
  }
  const auto deadline = std::chrono::steady_clock::now() + kDrainWait;
  for (std::future<Part>& part : parts) {
    if (part.wait_until(deadline) != std::future_status::ready) {
      return Status::Unavailable("a shard did not write its series in time");
    }
    const Part answer = part.get();
    for (std::size_t i = 0; i < due.size(); ++i) {
      records[i] += answer[i].first;
      counts[i] += answer[i].second;
    }
  }
  // The alerts of those readings leave before the state that claims them.
  if (!flush_alerts_(std::chrono::steady_clock::now() + kStoreTimeout)) {
    return Status::Unavailable("alerts not delivered within " +
                               std::to_string(kStoreTimeout.count()) + " s");
  }
  std::map<std::int32_t, std::string> encoded;
  std::size_t bytes = 0, series = 0;
  for (std::size_t i = 0; i < due.size(); ++i) {
    encoded[due[i]] = EncodePartitionState(
        options_.topic, due[i], owned_[due[i]].next_offset, records[i], counts[i]);
    bytes += encoded[due[i]].size();
    series += counts[i];
  }
  if (Status status = store_->Save(encoded); !status.ok()) return status;
  for (std::int32_t p : due) owned_[p].saved_offset = owned_[p].next_offset;
  LogDebug("kafka partition state saved", {{"partitions", due.size()},
                                           {"series", series},
                                           {"bytes", bytes},
                                           {"seconds", SecondsSince(begun)}});
  return Status::Ok();
}

void KafkaInput::CommitOffsets() {
  rd_kafka_topic_partition_list_t* offsets =
      rd_kafka_topic_partition_list_new(static_cast<int>(owned_.size()));
  for (const auto& [partition, owned] : owned_) {
    if (owned.saved_offset < 0) continue;
    rd_kafka_topic_partition_list_add(offsets, options_.topic.c_str(), partition)
        ->offset = owned.saved_offset;
  }
  // Asynchronous; one refused during a rebalance is made again next time.
  if (offsets->cnt > 0) rd_kafka_commit(consumer_, offsets, 1);
  rd_kafka_topic_partition_list_destroy(offsets);
}

void KafkaInput::Assign(rd_kafka_topic_partition_list_t* partitions) {
  const SteadyTime begun = std::chrono::steady_clock::now();
  std::vector<std::int32_t> ours;
  for (int i = 0; i < partitions->cnt; ++i) {
    if (options_.topic == partitions->elems[i].topic) {
      ours.push_back(partitions->elems[i].partition);
    }
  }
  auto stored = store_->Load(ours);
  if (!stored.ok()) {
    // Without their state these partitions would be judged afresh: leave them
    // unread until the next rebalance.
    Fail(stored.status());
    rd_kafka_assign(consumer_, nullptr);
    return;
  }
  // The records view these bytes, which the shards' tasks hold until the
  // last record is restored.
  auto loaded = std::make_shared<const std::map<std::int32_t, std::string>>(
      std::move(stored).value());
  std::uint64_t restored = 0;
  const EventTime now = WallClockNow();
  auto records = std::make_shared<std::vector<CheckpointSeries>>();
  for (int i = 0; i < partitions->cnt; ++i) {
    rd_kafka_topic_partition_t& element = partitions->elems[i];
    if (options_.topic != element.topic) continue;
    Owned owned;
    element.offset =
        options_.start_at_end ? RD_KAFKA_OFFSET_END : RD_KAFKA_OFFSET_BEGINNING;
    if (auto record = loaded->find(element.partition); record != loaded->end()) {
      auto state =
          DecodePartitionState(record->second, options_.topic, element.partition);
      if (!state.ok()) {
        Fail(Status::Corruption("partition " + std::to_string(element.partition) +
                                " record: " + state.status().message()));
        rd_kafka_assign(consumer_, nullptr);
        return;
      }
      owned.next_offset = owned.saved_offset = state->next_offset;
      element.offset = state->next_offset;
      for (CheckpointSeries& s : state->series) {
        owned.series.insert(s.name);
        records->push_back(std::move(s));
      }
    }
    owned_[element.partition] = std::move(owned);
  }
  // Into the shards, each series to its own.
  std::vector<std::vector<std::size_t>> by_shard(shards_->size());
  for (std::size_t i = 0; i < records->size(); ++i) {
    by_shard[shards_->ShardFor((*records)[i].name)].push_back(i);
  }
  // Every shard restores its series at the same time, each record's state
  // freed once its monitor is built.
  std::vector<std::future<std::uint64_t>> answers;
  for (std::size_t s = 0; s < shards_->size(); ++s) {
    if (by_shard[s].empty()) continue;
    auto answer = shards_->shard(s).AskLater<std::uint64_t>(
        [records, loaded, indices = std::move(by_shard[s]), now](ShardState& state) {
          std::vector<std::string> names;
          for (std::size_t i : indices) names.push_back((*records)[i].name);
          state.ForgetSeries(names);  // a stale copy, if any
          ReconfigureReport report;
          std::uint64_t count = 0;
          for (std::size_t i : indices) {
            CheckpointSeries& record = (*records)[i];
            const Status status = state.RestoreSeries(record, now, &report);
            if (status.ok()) {
              ++count;
            } else {
              LogWarning("series not restored",
                         {{"series", record.name}, {"reason", status.message()}});
            }
            record.engine_state = {};
            std::vector<CovariateObservation>().swap(record.covariate_history);
          }
          return count;
        });
    if (answer) answers.push_back(std::move(*answer));
  }
  const auto deadline = std::chrono::steady_clock::now() + kDrainWait;
  for (std::future<std::uint64_t>& answer : answers) {
    if (answer.wait_until(deadline) == std::future_status::ready)
      restored += answer.get();
  }
  restored_series_.fetch_add(restored);
  partition_count_ = owned_.size();
  if (const rd_kafka_resp_err_t error = rd_kafka_assign(consumer_, partitions); error) {
    Fail(Status::Unavailable(std::string("kafka assign: ") + rd_kafka_err2str(error)));
  }
  std::string list;
  for (std::int32_t p : ours) list += (list.empty() ? "" : ",") + std::to_string(p);
  LogInfo("kafka partitions assigned", {{"topic", options_.topic},
                                        {"partitions", list},
                                        {"records", loaded->size()},
                                        {"series_restored", restored},
                                        {"seconds", SecondsSince(begun)}});
}

void KafkaInput::Revoke(rd_kafka_topic_partition_list_t* partitions) {
  const SteadyTime begun = std::chrono::steady_clock::now();
  std::vector<std::int32_t> ours;
  for (int i = 0; i < partitions->cnt; ++i) {
    const std::int32_t p = partitions->elems[i].partition;
    if (options_.topic == partitions->elems[i].topic && owned_.count(p))
      ours.push_back(p);
  }
  if (Status status = SavePartitions(ours); !status.ok()) {
    // The next owner resumes from the previous record: the readings after it
    // are judged again (their alerts come again, with the same ids).
    Fail(status);
  }
  CommitOffsets();
  std::vector<std::vector<std::string>> names(shards_->size());
  std::size_t series = 0;
  std::string list;
  for (std::int32_t p : ours) {
    for (const std::string& name : owned_[p].series) {
      names[shards_->ShardFor(name)].push_back(name);
      ++series;
    }
    owned_.erase(p);
    list += (list.empty() ? "" : ",") + std::to_string(p);
  }
  for (std::size_t s = 0; s < shards_->size(); ++s) {
    if (names[s].empty()) continue;
    (void)shards_->shard(s).Ask<bool>(
        [forget = std::move(names[s])](ShardState& state) {
          state.ForgetSeries(forget);
          return true;
        },
        std::chrono::duration_cast<std::chrono::milliseconds>(kDrainWait));
  }
  partition_count_ = owned_.size();
  rd_kafka_assign(consumer_, nullptr);
  LogInfo("kafka partitions revoked", {{"topic", options_.topic},
                                       {"partitions", list},
                                       {"series", series},
                                       {"seconds", SecondsSince(begun)}});
}

}  // namespace plumbline
