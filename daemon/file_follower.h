// FileFollower: follows a reading file as it grows (like `tail -F`), parsing
// complete lines and routing them to the shards. One thread per file, which
// looks at the file every poll_interval.
//
// - Rotation (the path now names another file: rename + create): the old file
//   is read to its end (its last line counts even without a newline), then
//   the new one from its start. While the path names no file, the old one is
//   still followed. A rotation while the daemon was down is finished the same
//   way at start when the old file is still in the same folder (renamed, so
//   the same device and inode, e.g. readings.csv.1); a compressed or moved
//   old file is not found, and its tail past the saved offset is not read.
// - Truncation (the file is shorter than the offset read so far, same file):
//   reading restarts at its start; a partial line held from before is dropped.
// - Offset across restarts: the offset of the last complete line handed to
//   the shards, with the file's device and inode, is kept in the state
//   directory (follow-<hash of path>.offset, replaced by write-temp, fsync,
//   rename), at most once per second and at Stop. At start, a saved offset is
//   used when the device and inode still match and the file is at least that
//   long; otherwise the file is read from its start (it was replaced or
//   truncated while the daemon was down), or from its end when start_at is
//   `end` and no offset was ever saved.
// - With checkpoints (a write-ahead log), the offset is part of the durable
//   state instead: the follower is a stream of the log (FollowStreamName:
//   the file's device, inode and an epoch that grows when the file is
//   truncated), its batches carry that name, and after each read it logs a
//   mark holding the offset of the last complete line pushed, under the
//   log's stream gate, as an acknowledged TCP connection does. A checkpoint's
//   stream table then holds exactly the offset whose readings are in the
//   checkpoint or in the log after it, and a restart replays only the
//   batches a mark follows. At start the follower resumes at the offset the
//   table holds for the file it finds (logging a resume record, so the
//   batches of an earlier run after its last mark are never taken): from the
//   start if the table knows the path only under another device and inode,
//   or the file is shorter than the offset (replaced or truncated while
//   stopped). The offset file above is then read only when the table knows
//   nothing of the path (a state directory from before), and still written.
// - Backpressure: a full shard queue blocks this thread, which simply reads
//   later; the file is the buffer.
//
// Thread-safety: Start and Stop from one controlling thread; the counters from any.
#pragma once

#include <atomic>
#include <condition_variable>
#include <cstdint>
#include <mutex>
#include <optional>
#include <string>
#include <string_view>
#include <thread>
#include <utility>
#include <vector>

#include "config/service_options.h"
#include "daemon/clock.h"
#include "daemon/file_system.h"
#include "daemon/pipeline_observer.h"
#include "daemon/shard.h"
#include "daemon/write_ahead_log.h"
#include "detectors/status.h"

namespace plumbline {

// Where a follower was: which file (device, inode) and how far into it.
struct FollowPosition {
  std::uint64_t device = 0;
  std::uint64_t inode = 0;
  std::uint64_t offset = 0;
};
// "device inode offset\n" (plus a comment line naming the path), and back.
std::string FormatFollowPosition(const std::string& path, const FollowPosition& position);
std::optional<FollowPosition> ParseFollowPosition(std::string_view text);
// The state file of `path` inside `state_directory`.
std::string FollowStatePath(const std::string& state_directory, const std::string& path);

// A followed file as a stream of the write-ahead log:
// "file:<device>:<inode>:<epoch> <path>"; the stream's mark is a byte offset.
struct FollowStream {
  std::uint64_t device = 0;
  std::uint64_t inode = 0;
  std::uint64_t epoch = 0;  // truncations of the same file seen so far
  std::string path;
};
std::string FollowStreamName(const FollowStream& stream);
std::optional<FollowStream> ParseFollowStreamName(std::string_view name);

class FileFollower {
 public:
  static constexpr int kLoggedRejections = 5;  // bad lines logged per file, then counted

  // `shards`, `file_system` and `observer` (may be null) must outlive it.
  FileFollower(FileInputOptions options, std::string state_directory, ShardSet* shards,
               FileSystem* file_system, PipelineObserver* observer);
  ~FileFollower();  // stops

  // With checkpoints: the log whose stream table holds the offset (see
  // above). Call before Start; `wal` must outlive the follower.
  void set_write_ahead_log(WriteAheadLog* wal) { wal_ = wal; }

  // Reads the saved position and starts the thread. The file need not exist yet.
  void Start();
  // Finishes the chunk in hand, saves the position, and joins the thread.
  void Stop();

  std::uint64_t readings() const { return readings_.load(); }
  std::uint64_t rejected_lines() const { return rejected_.load(); }
  // Bytes of the current file consumed up to its last complete line.
  std::uint64_t committed_offset() const { return committed_.load(); }
  // Rotations and truncations seen.
  std::uint64_t reopened() const { return reopened_.load(); }

 private:
  void Run();
  bool OpenCurrent(bool use_saved);  // opens options_.path; false if it does not exist
  // At the first open: when the path names another file than the one the
  // state left off in (rotated while the daemon was down) and that file is
  // still in the path's folder under another name (found by device and
  // inode) with bytes past the offset, opens it at the offset, so its tail
  // is read before the new file, as for a rotation seen live. False otherwise.
  bool OpenRotatedAway();
  void CloseFile();
  // Reads to the end of the open file; false when shards stopped taking input.
  bool ReadAvailable();
  // Feeds `bytes` (and with `finish` ends the last line), pushes what was
  // routed and marks the stream's new offset, all under the stream gate.
  // False when the shards stopped taking input.
  bool Deliver(std::string_view bytes, bool finish);
  // With a log: picks the stream and offset for the file just opened (see
  // above) and logs its resume; returns the offset, or nullopt when the table
  // knows nothing of the path.
  std::optional<std::uint64_t> ResumeFromLog(std::uint64_t size);
  // With a log: the streams its table holds for this path, with their offsets.
  std::vector<std::pair<FollowStream, std::uint64_t>> PathStreams() const;
  // With a log: makes (device, inode, epoch) of the open file the stream
  // its batches and marks carry, from `offset`, and logs its resume.
  void BeginStream(std::uint64_t epoch, std::uint64_t offset);
  void SavePosition(bool force);
  void NewParser();

  const FileInputOptions options_;
  const std::string state_path_;
  ShardSet* const shards_;
  FileSystem* const file_system_;
  PipelineObserver* const observer_;

  std::mutex mutex_;  // guards stop_
  std::condition_variable wake_;
  bool stop_ = false;
  std::thread thread_;

  WriteAheadLog* wal_ = nullptr;

  // Follower thread only:
  int fd_ = -1;
  FollowStream stream_;          // with a log: the open file's stream
  std::string stream_name_;      // FollowStreamName(stream_)
  std::uint64_t marked_ = 0;     // offset of its last mark
  FollowPosition position_;              // of the open file; offset = bytes read
  std::optional<FollowPosition> saved_;  // as loaded or last written
  std::chrono::steady_clock::time_point last_save_{};
  std::unique_ptr<ShardRouter> router_;
  std::unique_ptr<ReadingParser> parser_;
  std::uint64_t logged_rejections_ = 0;
  bool status_logged_ = false;  // "waiting for the file" said once

  std::atomic<std::uint64_t> readings_{0};
  std::atomic<std::uint64_t> rejected_{0};
  std::atomic<std::uint64_t> committed_{0};
  std::atomic<std::uint64_t> reopened_{0};
};

}  // namespace plumbline
