// WriteAheadLog: the readings accepted since the last checkpoint, so that a
// daemon killed at any moment loses none it acknowledged. Shards append each
// batch as they queue it (Shard::Push), so the log's order is each shard's
// processing order; TCP sessions in acknowledged mode append marks (how many
// lines of a named stream are taken). One writer thread writes what has
// gathered and fsyncs once for all of it (group commit): while one fsync
// runs, the next group gathers. Fsyncs begin at least kMinSyncGap apart:
// under a steady stream a fast disk would otherwise be asked for thousands
// a second, and each one's journal commit stalls every other write to the
// same file system, the alert log's among them (measured at 250,000
// readings a second: about 1,800 fsyncs a second without the gap, 400 with
// it; with the alert log's own fsync thread, ingest-to-alert p99 fell from a
// median of 18 ms to 3.4 ms). An acknowledgement waits at most that much
// longer.
//
// On disk (in the state directory): segments `wal-<first sequence, 20
// digits>.log`, each a run of records
//
//   u32 payload length  u32 CRC-32C of the payload  payload
//
// payload (detectors/snapshot.h encoding): u64 sequence, u8 type (1 batch,
// 2 mark, 3 resume), the stream name ("" for none); a batch: u64 count, then
// per reading its series, time (i64 microseconds) and value (f64); a mark or
// a resume: u64 lines. A resume is logged when an acknowledged connection of
// the stream begins (lines: the durable count it resumes from): the stream's
// batches between its last mark and a resume were never acknowledged (the
// sender sends those lines again), nor are those after its last record.
// Sequences start at 1 and grow by one per record. A checkpoint starts a new
// segment (Rotate); segments whose records every shard has in a checkpoint
// that is not the newest are deleted (DeleteThrough). A record cut short or
// failing its checksum ends the replay of its segment (a torn write).
//
// Thread-safety: every method may be called from any thread.
#pragma once

#include <chrono>
#include <condition_variable>
#include <cstdint>
#include <functional>
#include <memory>
#include <mutex>
#include <shared_mutex>
#include <string>
#include <string_view>
#include <thread>
#include <unordered_map>
#include <vector>

#include "daemon/file_system.h"
#include "daemon/reading_batch.h"
#include "detectors/status.h"

namespace plumbline {

struct WalRecord {
  enum class Type : std::uint8_t { kBatch = 1, kMark = 2, kResume = 3 };
  std::uint64_t sequence = 0;
  Type type = Type::kBatch;
  std::string stream;
  struct Reading {
    std::string series;
    EventTime time = 0;
    double value = 0.0;
  };
  std::vector<Reading> readings;  // batch
  std::uint64_t lines = 0;        // mark, resume
};

// Stream names the daemon gives its own inputs: followed files
// ("file:<device>:<inode>:<epoch>:<path>", file_follower.h) and Kafka
// partitions ("kafka:<topic>/<partition>"). A sender's acknowledged TCP
// stream may not take one, or it could move a followed file's durable offset.
inline bool IsInternalStreamName(std::string_view name) {
  return name.starts_with("file:") || name.starts_with("kafka:");
}

class WriteAheadLog {
 public:
  static constexpr std::chrono::microseconds kMinSyncGap{2000};

  // Records appended and not yet handed to the disk, at most (one record may
  // go past it): an Append beyond waits for the writer, so a disk slower than
  // the readings slows the inputs instead of growing memory (DESIGN.md,
  // bounded queues). 64 MiB is some seconds of the fastest ingest measured.
  static constexpr std::size_t kDefaultMaxBufferBytes = std::size_t{64} << 20;

  // `file_system` must outlive the log. With `sync` false the log is written
  // but not fsynced (it then survives a killed process, not a lost machine).
  WriteAheadLog(std::string directory, FileSystem* file_system, bool sync = true,
                std::size_t max_buffer_bytes = kDefaultMaxBufferBytes);
  ~WriteAheadLog();  // Stop

  // Reads every segment in order and calls `each` per record after
  // sequence `skip_through`. Records up to it (a checkpoint holds them) are
  // checked and their marks counted, but their readings are not decoded.
  // Torn or corrupted records end their segment and are described in
  // *problems. Call before Start.
  Status Replay(const std::function<void(const WalRecord&)>& each,
                std::vector<std::string>* problems, std::uint64_t skip_through = 0);
  // Opens a new segment whose first sequence is at least `next_sequence` and
  // past every record replayed, and starts the writer thread.
  Status Start(std::uint64_t next_sequence);
  // Stops the writer after it has written everything appended.
  void Stop();

  // Append a record; returns its sequence. Blocks only while the records not
  // yet handed to the disk hold max_buffer_bytes. After a write failure the
  // record is not kept (nothing more becomes durable; see failure()).
  std::uint64_t AppendBatch(const ReadingBatch& batch, std::string_view stream);
  std::uint64_t AppendMark(std::string_view stream, std::uint64_t lines);
  std::uint64_t AppendResume(std::string_view stream, std::uint64_t lines);

  // Waits until every record up to `sequence` is durable; false on timeout
  // or after a write failure.
  bool WaitDurable(std::uint64_t sequence, std::chrono::milliseconds timeout);
  // Calls `done` (on the writer thread, or at once) when `sequence` is durable.
  void OnDurable(std::uint64_t sequence, std::function<void()> done);
  // Starts a new segment with the next record; returns that record's sequence.
  std::uint64_t Rotate();
  // Deletes the segments whose records all have sequences <= `sequence`.
  void DeleteThrough(std::uint64_t sequence);

  std::uint64_t next_sequence() const;
  std::uint64_t durable_sequence() const;
  // The first write or fsync failure (sticky); Ok while there is none.
  Status failure() const;
  // Lines taken per stream (marks), and the sequence the table is complete to.
  std::unordered_map<std::string, std::uint64_t> Streams(std::uint64_t* through) const;
  // Seeds the table (from a checkpoint) before Replay.
  void SetStreams(std::unordered_map<std::string, std::uint64_t> streams);
  // Drops a stream from the table (a followed file that was replaced), so
  // the table does not grow with every rotation. Not logged: a replay of
  // older marks may bring it back, which only costs its line in the table.
  void ForgetStream(std::string_view stream);
  // Bytes written and fsyncs done (group commit: many records per fsync).
  std::uint64_t bytes_written() const;
  std::uint64_t syncs() const;

  // Held shared by an acknowledged session from its first push of a read to
  // that read's mark, and exclusively by a checkpoint while it snapshots the
  // shards and reads the stream table: the table then counts exactly lines
  // whose batches are in the checkpoint or in the log after it.
  std::shared_mutex& stream_gate() { return stream_gate_; }

 private:
  void Run();
  std::uint64_t Append(std::string payload_tail, std::string_view stream,
                       WalRecord::Type type);
  std::string SegmentPath(std::uint64_t first) const;
  std::vector<std::pair<std::uint64_t, std::string>> Segments() const;

  const std::string directory_;
  FileSystem* const file_system_;
  const bool sync_;
  const std::size_t max_buffer_bytes_;

  mutable std::mutex mutex_;  // guards everything below
  std::condition_variable work_;
  std::condition_variable durable_changed_;
  std::condition_variable
      room_;  // buffer_ was handed to the writer, or a failure, or stop_
  std::string buffer_;                   // records not yet handed to the writer
  std::size_t rotate_offset_ = 0;        // buffer_ offset where a new segment starts
  std::uint64_t rotate_first_ = 0;       // its first sequence; 0: no rotation asked
  std::uint64_t next_ = 1;
  std::uint64_t durable_ = 0;
  std::unordered_map<std::string, std::uint64_t> streams_;
  std::vector<std::pair<std::uint64_t, std::function<void()>>> waiting_;
  Status failure_;
  bool stop_ = false;
  std::uint64_t bytes_ = 0, syncs_ = 0;

  std::unique_ptr<WritableFile> file_;  // writer thread only (after Start)
  std::thread writer_;
  std::shared_mutex stream_gate_;
};

}  // namespace plumbline
