// Checkpoints: the state of every series, written so that a restarted daemon
// carries on where the last one stopped instead of learning every series
// again.
//
// On disk (in the state directory): two generations, `checkpoint-0.plc` and
// `checkpoint-1.plc`, written alternately, each replaced atomically (write a
// temporary file, fsync, rename, fsync the directory; FileSystem::ReplaceFile).
// A file is
//
//   "PLUMBCKP"  u32 format version  u32 CRC-32C of the rest
//   u64 generation  u64 payload length  payload
//
// (integers little-endian). Reading takes the valid file with the higher
// generation; a file that is cut short, fails its checksum or is not a
// checkpoint is reported and the other generation used. Writing uses the
// current format version; reading also takes the older versions this build
// knows (kOldestCheckpointFormatVersion on: what a version lacks is read as
// empty, and the next checkpoint is written in the current one). A file of a
// version outside that range is refused with a message naming the versions:
// this build neither reads nor overwrites it, so a downgrade never destroys
// state.
//
// Versions: 1, the first; 2 adds to each series record the covariate
// observations the engine holds of it (Engine::CovariateHistory).
//
// The payload (detectors/snapshot.h encoding): "PLCK"; the write-ahead log's
// position (daemon/write_ahead_log.h: next sequence, the sequence through
// which every shard's batches are in this checkpoint, and the acknowledged
// streams' line counts); u64 series count, then per series its name, the
// sequence through which its shard's batches are in its state, the engine's
// state of it (Engine::SaveSeries: the profile settings it ran under and its
// monitor), what the shard keeps beside it and (version 2) its covariate
// observations, if a profile names it as a covariate. Series are stored by
// name, not by shard, so a restart with another shard count routes each to
// its new shard, its covariate observations with it.
//
// Thread-safety: CheckpointStore is used by one thread at a time.
#pragma once

#include <cstdint>
#include <memory>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "daemon/file_system.h"
#include "detectors/covariate.h"
#include "detectors/event_time.h"
#include "detectors/snapshot.h"
#include "detectors/status.h"

namespace plumbline {

inline constexpr std::uint32_t kCheckpointFormatVersion = 2;
inline constexpr std::uint32_t kOldestCheckpointFormatVersion = 1;

// The payload's opening.
struct CheckpointHead {
  std::uint64_t wal_next = 1;       // the log's next sequence when it was taken
  std::uint64_t wal_done = 0;       // every shard's batches through this are in it
  std::vector<std::pair<std::string, std::uint64_t>> streams;  // lines per stream
};

// One series as the payload holds it. Its engine state is a view: into the
// payload it was parsed from, or the writer's string, which must outlive it
// (a restart reads a million of them without copying each).
struct CheckpointSeries {
  std::string name;
  std::uint64_t wal_done = 0;  // its shard's batches through this are in its state
  std::string_view engine_state;  // Engine::SaveSeries
  long long readings = 0;    // SeriesExtras
  EventTime last_time = 0;
  double last_value = 0.0;
  EventTime newest = 0;
  bool has_extras = false;
  // Version 2: the series' observations on the covariate board, oldest first
  // (empty when no profile names it as a covariate).
  std::vector<CovariateObservation> covariate_history;
};

// Appends one series record to a payload under construction.
void WriteCheckpointSeries(const CheckpointSeries& series, SnapshotWriter& w);
// The payload's opening: its tag, the head and the number of series records
// after it.
std::string CheckpointPayloadHead(const CheckpointHead& head, std::uint64_t series);
// Parses a whole payload written in format `version` (one this build reads).
// The records' engine states view `payload`, which must outlive them.
struct Checkpoint {
  CheckpointHead head;
  std::vector<CheckpointSeries> series;
};
StatusOr<Checkpoint> ParseCheckpointPayload(
    std::string_view payload, std::uint32_t version = kCheckpointFormatVersion);

// The frame around a payload, and its check (Corruption, or
// FailedPrecondition for another format version).
std::string FrameCheckpoint(std::string_view payload, std::uint64_t generation);
struct UnframedCheckpoint {
  std::uint64_t generation = 0;
  std::uint32_t version = kCheckpointFormatVersion;  // of the payload
  std::string_view payload;  // into the framed bytes
};
StatusOr<UnframedCheckpoint> UnframeCheckpoint(std::string_view file);

class AlertPublisher;

// Restarts replay the log's tail, which raises again the alerts raised since
// the last checkpoint. Alert ids are stable (a hash of series, event, kind,
// detected_at and change_at; engine.h), so a filter in front of the sinks
// drops every alert whose id the alert log at `alert_log_path` already holds
// (its last kKnownAlertBytes are read; the replayed alerts are among the
// newest). `next` must outlive the filter; *known is the count of ids read.
inline constexpr std::size_t kKnownAlertBytes = 64u << 20;
std::unique_ptr<AlertPublisher> MakeKnownAlertFilter(const std::string& alert_log_path,
                                                     AlertPublisher* next,
                                                     std::size_t* known);

class CheckpointStore {
 public:
  // `file_system` must outlive the store.
  CheckpointStore(std::string directory, FileSystem* file_system);

  // Reads both generations; returns the newest good payload (its format
  // version in format_version()), in the file it was read from, mapped into
  // memory (MappedFile: a checkpoint can be gigabytes, and neither a copy nor
  // a zeroed buffer of it is made). NotFound when there is none (a first
  // start), FailedPrecondition when a file is of a version this build does
  // not read. Every file passed over is described in *skipped (path and
  // reason), for the log.
  struct Loaded {
    MappedFile file;
    std::string_view payload;  // into file
  };
  StatusOr<Loaded> Load(std::vector<std::string>* skipped);

  // Writes `payload` as the next generation, over the older file.
  Status Save(std::string_view payload);
  // The same for a payload in pieces (concatenated in order), written to the
  // file one after the other and then freed: no joined copy is made.
  Status Save(std::vector<std::string>* pieces);

  std::string Path(int slot) const;
  std::uint64_t generation() const { return generation_; }
  std::uint32_t format_version() const { return format_version_; }

 private:
  // Writes the payload, framed, as the next generation.
  Status Write(std::span<const std::string_view> payload);
  std::string directory_;
  FileSystem* file_system_;
  std::uint64_t generation_ = 0;  // of the newest good file
  int newest_slot_ = 1;           // so that the first Save writes slot 0
  std::uint32_t format_version_ = kCheckpointFormatVersion;  // of the newest good file
};

}  // namespace plumbline
