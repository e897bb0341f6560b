#include "daemon/checkpoint.h"

#include <fcntl.h>
#include <unistd.h>

#include <algorithm>
#include <cerrno>
#include <cstring>
#include <limits>
#include <unordered_set>

#include "daemon/engine.h"
#include "daemon/file_system.h"
#include "daemon/shard.h"

namespace plumbline {
namespace {

constexpr std::string_view kMagic = "PLUMBCKP";
constexpr std::size_t kHeaderBytes = 8 + 4 + 4 + 8 + 8;

std::uint32_t ReadU32(const char* p) {
  std::uint32_t v = 0;
  for (int i = 0; i < 4; ++i)
    v |= std::uint32_t{static_cast<std::uint8_t>(p[i])} << (8 * i);
  return v;
}

std::uint64_t ReadU64(const char* p) {
  std::uint64_t v = 0;
  for (int i = 0; i < 8; ++i)
    v |= std::uint64_t{static_cast<std::uint8_t>(p[i])} << (8 * i);
  return v;
}

}  // namespace

void WriteCheckpointSeries(const CheckpointSeries& s, SnapshotWriter& w) {
  w.String(s.name);
  w.U64(s.wal_done);
  w.String(s.engine_state);
  w.Bool(s.has_extras);
  w.I64(s.readings);
  w.I64(s.last_time);
  w.F64(s.last_value);
  w.I64(s.newest);
  w.U64(s.covariate_history.size());
  for (const CovariateObservation& point : s.covariate_history) {
    w.I64(point.t);
    w.F64(point.value);
  }
}

std::string CheckpointPayloadHead(const CheckpointHead& head, std::uint64_t series) {
  SnapshotWriter w;
  w.Tag("PLCK");
  w.U64(head.wal_next);
  w.U64(head.wal_done);
  w.U64(head.streams.size());
  for (const auto& [stream, lines] : head.streams) {
    w.String(stream);
    w.U64(lines);
  }
  w.U64(series);
  return w.Take();
}

StatusOr<Checkpoint> ParseCheckpointPayload(std::string_view payload,
                                            std::uint32_t version) {
  if (version < kOldestCheckpointFormatVersion || version > kCheckpointFormatVersion) {
    return Status::FailedPrecondition("checkpoint format version " +
                                      std::to_string(version) + " is not read here");
  }
  SnapshotReader r(payload);
  Checkpoint checkpoint;
  r.Tag("PLCK");
  checkpoint.head.wal_next = r.U64();
  checkpoint.head.wal_done = r.U64();
  checkpoint.head.streams.resize(r.Count(16));
  for (auto& [stream, lines] : checkpoint.head.streams) {
    stream = r.String();
    lines = r.U64();
  }
  // Each record takes at least 8 + 8 + 8 + 1 + 32 bytes (and 8 more from
  // version 2).
  std::vector<CheckpointSeries>& out = checkpoint.series;
  out.resize(r.Count(version >= 2 ? 65 : 57));
  for (CheckpointSeries& s : out) {
    s.name = r.String();
    s.wal_done = r.U64();
    s.engine_state = r.StringView();
    s.has_extras = r.Bool();
    s.readings = r.I64();
    s.last_time = r.I64();
    s.last_value = r.F64();
    s.newest = r.I64();
    if (version >= 2) {
      s.covariate_history.resize(
          r.BoundedCount(16, CovariateBoard::kDepth, "covariate observations"));
      for (CovariateObservation& point : s.covariate_history) {
        point.t = r.Time("covariate observation time");
        point.value = r.Finite("covariate observation value");
      }
    }
  }
  if (r.ok() && !r.AtEnd()) r.Fail("bytes after the last series");
  if (!r.ok()) return r.status();
  return checkpoint;
}

namespace {

// A frame's header (everything before the payload) for a payload in pieces.
std::string FrameHead(std::span<const std::string_view> payload,
                      std::uint64_t generation) {
  std::size_t size = 0;
  for (std::string_view piece : payload) size += piece.size();
  SnapshotWriter rest;
  rest.U64(generation);
  rest.U64(size);
  std::uint32_t crc = Crc32c(rest.bytes());  // of everything after the check
  for (std::string_view piece : payload) crc = Crc32c(piece, crc);
  SnapshotWriter head;
  head.Tag(kMagic.substr(0, 4));
  head.Tag(kMagic.substr(4, 4));
  head.U32(kCheckpointFormatVersion);
  head.U32(crc);
  return head.bytes() + rest.bytes();
}

std::vector<std::string_view> Views(const std::vector<std::string>& pieces) {
  return std::vector<std::string_view>(pieces.begin(), pieces.end());
}

}  // namespace

std::string FrameCheckpoint(std::string_view payload, std::uint64_t generation) {
  std::string out = FrameHead(std::span<const std::string_view>(&payload, 1), generation);
  out.reserve(kHeaderBytes + payload.size());  // the payload is copied once
  out.append(payload);
  return out;
}

StatusOr<UnframedCheckpoint> UnframeCheckpoint(std::string_view file) {
  if (file.size() < kHeaderBytes || file.substr(0, kMagic.size()) != kMagic) {
    return Status::Corruption("not a checkpoint (too short or no PLUMBCKP header)");
  }
  const std::uint32_t version = ReadU32(file.data() + 8);
  if (version < kOldestCheckpointFormatVersion || version > kCheckpointFormatVersion) {
    return Status::FailedPrecondition(
        "checkpoint format version " + std::to_string(version) + "; this build reads " +
        std::to_string(kOldestCheckpointFormatVersion) + " to " +
        std::to_string(kCheckpointFormatVersion) +
        " (run the build that wrote it, or move the file away to start afresh)");
  }
  const std::uint32_t crc = ReadU32(file.data() + 12);
  const std::string_view body = file.substr(16);
  const std::uint64_t length = ReadU64(file.data() + 24);
  if (length != file.size() - kHeaderBytes) {
    return Status::Corruption(
        "checkpoint cut short: " + std::to_string(file.size() - kHeaderBytes) + " of " +
        std::to_string(length) + " payload bytes");
  }
  if (Crc32c(body) != crc) return Status::Corruption("checkpoint checksum mismatch");
  return UnframedCheckpoint{ReadU64(file.data() + 16), version,
                            file.substr(kHeaderBytes)};
}

CheckpointStore::CheckpointStore(std::string directory, FileSystem* file_system)
    : directory_(std::move(directory)), file_system_(file_system) {}

std::string CheckpointStore::Path(int slot) const {
  std::string path = directory_;
  if (!path.empty() && path.back() != '/') path += '/';
  return path + "checkpoint-" + std::to_string(slot) + ".plc";
}

namespace {

// The first `bytes` bytes of a file (fewer if it is shorter); empty if it
// cannot be read.
std::string ReadHead(const std::string& path, std::size_t bytes) {
  std::string head(bytes, '\0');
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) return {};
  std::size_t got = 0;
  while (got < bytes) {
    const ssize_t n = ::read(fd, head.data() + got, bytes - got);
    if (n < 0 && errno == EINTR) continue;
    if (n <= 0) break;
    got += static_cast<std::size_t>(n);
  }
  ::close(fd);
  head.resize(got);
  return head;
}

}  // namespace

StatusOr<CheckpointStore::Loaded> CheckpointStore::Load(
    std::vector<std::string>* skipped) {
  // The headers first: a file of another format version refuses the start
  // (a downgrade must not overwrite it), and the generations say which file
  // to read whole first. Only the newest file that checks out is read whole
  // (a checkpoint can be gigabytes); the older one only when the newer fails.
  struct Candidate {
    int slot;
    std::uint64_t generation;  // from the header; 0 when it has none
  };
  std::vector<Candidate> order;
  for (int slot = 0; slot < 2; ++slot) {
    const std::string head = ReadHead(Path(slot), kHeaderBytes);
    if (head.size() >= 16 && head.substr(0, kMagic.size()) == kMagic) {
      const std::uint32_t version = ReadU32(head.data() + 8);
      if (version < kOldestCheckpointFormatVersion || version > kCheckpointFormatVersion) {
        return Status::FailedPrecondition(Path(slot) + ": " +
                                          UnframeCheckpoint(head).status().message());
      }
    }
    order.push_back(
        {slot, head.size() == kHeaderBytes && head.substr(0, kMagic.size()) == kMagic
                   ? ReadU64(head.data() + 16)
                   : 0});
  }
  std::stable_sort(order.begin(), order.end(), [](const Candidate& a, const Candidate& b) {
    return a.generation > b.generation;
  });
  for (const Candidate& candidate : order) {
    const int slot = candidate.slot;
    // However large (FileSystem::ReadFile stops at 16 MiB), and mapped rather
    // than read into a buffer.
    auto file = MappedFile::Open(Path(slot));
    if (!file.ok()) {
      if (file.status().code() != Status::Code::kNotFound && skipped) {
        skipped->push_back(file.status().message());
      }
      continue;
    }
    auto framed = UnframeCheckpoint(file->bytes());
    if (!framed.ok()) {
      if (framed.status().code() == Status::Code::kFailedPrecondition) {
        return Status::FailedPrecondition(Path(slot) + ": " + framed.status().message());
      }
      if (skipped) skipped->push_back(Path(slot) + ": " + framed.status().message());
      continue;
    }
    generation_ = framed->generation;
    format_version_ = framed->version;
    newest_slot_ = slot;
    return Loaded{std::move(file).value(), framed->payload};
  }
  return Status::NotFound("no checkpoint in " + directory_);
}

Status CheckpointStore::Save(std::string_view payload) {
  return Write(std::span<const std::string_view>(&payload, 1));
}

Status CheckpointStore::Save(std::vector<std::string>* pieces) {
  const Status status = Write(Views(*pieces));
  std::vector<std::string>().swap(*pieces);
  return status;
}

Status CheckpointStore::Write(std::span<const std::string_view> payload) {
  const int slot = 1 - newest_slot_;
  const std::string head = FrameHead(payload, generation_ + 1);
  std::vector<std::string_view> file{head};
  file.insert(file.end(), payload.begin(), payload.end());
  if (Status s = file_system_->ReplaceFileFromPieces(Path(slot), file); !s.ok()) return s;
  ++generation_;
  newest_slot_ = slot;
  return Status::Ok();
}

namespace {

void SaveProfile(const ProfileOptions& p, SnapshotWriter& w) {
  w.Tag("PROF");
  w.U8(static_cast<std::uint8_t>(p.kind));
  w.I64Vector(p.seasons);
  w.U8(static_cast<std::uint8_t>(p.gaps));
  w.I64(p.warmup);
  w.F64(p.arl0);
  w.F64(p.shift);
  w.U64(p.detectors.size());
  for (DetectorKind d : p.detectors) w.U8(static_cast<std::uint8_t>(d));
  w.I64(p.agree);
  w.OptionalI64(p.silence_after);
  w.U64(p.harmonics.size());
  for (int h : p.harmonics) w.I64(h);
  w.OptionalI64(p.every);
  w.OptionalI64(p.memory);
  w.Bool(p.trend);
  w.F64(p.level_noise);
  w.Bool(p.level_noise_auto);
  w.I64(p.lateness);
  w.I64(p.agree_within);
  w.I64(p.cooldown);
  w.U64(p.covariates.size());
  for (const std::string& name : p.covariates) w.String(name);
  w.I64(p.covariate_max_age);
}

ProfileOptions LoadProfile(SnapshotReader& r) {
  ProfileOptions p;
  r.Tag("PROF");
  p.kind = static_cast<SeriesKind>(r.U8());
  p.seasons = r.I64Vector();
  p.gaps = static_cast<GapPolicy>(r.U8());
  p.warmup = static_cast<int>(r.I64());
  p.arl0 = r.F64();
  p.shift = r.F64();
  p.detectors.resize(r.Count(1));
  for (DetectorKind& d : p.detectors) d = static_cast<DetectorKind>(r.U8());
  p.agree = static_cast<int>(r.I64());
  p.silence_after = r.OptionalI64();
  p.harmonics.resize(r.Count(8));
  for (int& h : p.harmonics) h = static_cast<int>(r.I64());
  p.every = r.OptionalI64();
  p.memory = r.OptionalI64();
  p.trend = r.Bool();
  p.level_noise = r.F64();
  p.level_noise_auto = r.Bool();
  p.lateness = r.I64();
  p.agree_within = static_cast<int>(r.I64());
  p.cooldown = static_cast<int>(r.I64());
  p.covariates.resize(r.Count(8));
  for (std::string& name : p.covariates) name = r.String();
  p.covariate_max_age = r.I64();
  return p;
}

}  // namespace

void Engine::SaveSeries(const std::function<void(const std::string& name,
                                                 std::string_view state)>& each) const {
  SnapshotWriter w;  // one buffer for all of them
  for (const auto& [name, series] : series_) {
    w.Clear();
    SaveProfile(series->design->profile, w);
    series->monitor->Save(w);
    each(name, w.bytes());
  }
}

std::optional<std::string> Engine::SaveOneSeries(std::string_view name) const {
  const Series* series = Lookup(name);
  if (!series) return std::nullopt;
  SnapshotWriter w;
  SaveProfile(series->design->profile, w);
  series->monitor->Save(w);
  return w.Take();
}

void Engine::ForgetSeries(const std::vector<std::string>& names) {
  std::size_t forgotten = 0;
  for (const std::string& name : names) {
    forgotten += Drop(name);
    covariates_->Forget(name);  // its observations went with its state
  }
  if (forgotten > 0) RescheduleAll();  // deadlines may name forgotten series
}

std::vector<CovariateObservation> Engine::CovariateHistory(std::string_view name) const {
  return covariates_->History(name);
}

void Engine::RestoreCovariateHistory(std::string_view name,
                                     const std::vector<CovariateObservation>& history) {
  covariates_->Restore(name, history);
}

Status Engine::RestoreSeries(std::string_view name, std::string_view state,
                             ReconfigureReport* report) {
  SnapshotReader r(state);
  const ProfileOptions saved = LoadProfile(r);
  if (!r.ok()) return r.status();
  const ProfileOptions* profile = MatchProfile(config_, name);
  const ProfileDesign* design = profile ? DesignFor(profile) : nullptr;
  if (!design) {
    ++report->dropped;
    return Status::Ok();
  }
  const bool same = SameProfileSettings(saved, *profile);
  if (!same && !SameModelSettings(saved, *profile)) {
    ++report->restarted;
    return Status::Ok();
  }
  // A retuned series is read under the design it was saved with, then retuned.
  const ProfileDesign* saved_design = design;
  if (!same) {
    std::string why;
    if (!saved.IsValid(&why)) return Status::Corruption("saved profile: " + why);
    auto made =
        options_.make_design ? options_.make_design(saved) : ProfileDesign::Make(saved);
    if (!made.ok()) return made.status();
    retired_designs_.push_back(std::make_unique<ProfileDesign>(std::move(made).value()));
    saved_design = retired_designs_.back().get();
  }
  auto series = std::make_unique<Series>();
  series->name = std::string(name);
  series->design = saved_design;
  series->monitor = std::make_unique<SeriesMonitor>(saved_design);
  if (Status status = series->monitor->Load(r); !status.ok()) return status;
  if (!r.AtEnd())
    return Status::Corruption("bytes after the series state of " + series->name);
  if (!same) {
    series->design = design;
    series->monitor->Retune(design);
    ++report->retuned;
  } else {
    ++report->kept;
  }
  Series* raw = Adopt(std::move(series));
  Wire(raw);  // annotations, and the covariates it reads and publishes
  Schedule(raw);
  return Status::Ok();
}

void ShardState::SaveSeries(std::uint64_t wal_done, std::vector<std::string>* pieces,
                            std::uint64_t* count) const {
  SnapshotWriter w;
  engine_->SaveSeries([&](const std::string& name, std::string_view state) {
    if (w.bytes().empty()) w.Reserve(kCheckpointPiece + 2 * state.size() + 4096);
    WriteCheckpointSeries(ToCheckpointSeries(name, wal_done, state), w);
    ++*count;
    if (w.bytes().size() >= kCheckpointPiece) pieces->push_back(w.Take());
  });
  if (!w.bytes().empty()) pieces->push_back(w.Take());
}

CheckpointSeries ShardState::ToCheckpointSeries(const std::string& name,
                                                std::uint64_t wal_done,
                                                std::string_view engine_state) const {
  CheckpointSeries s;
  s.name = name;
  s.wal_done = wal_done;
  s.engine_state = engine_state;
  s.covariate_history = engine_->CovariateHistory(name);
  if (const SeriesExtras* extras = Find(name)) {
    s.has_extras = true;
    s.readings = extras->readings;
    s.last_time = extras->last_time;
    s.last_value = extras->last_value;
    s.newest = extras->newest;
  }
  return s;
}

void ShardState::SaveNamedSeries(const std::vector<std::string>& names,
                                 SnapshotWriter* w, std::uint64_t* count) const {
  for (const std::string& name : names) {
    std::optional<std::string> state = engine_->SaveOneSeries(name);
    if (!state) continue;
    WriteCheckpointSeries(ToCheckpointSeries(name, 0, *state), *w);
    ++*count;
  }
}

void ShardState::ForgetSeries(const std::vector<std::string>& names) {
  engine_->ForgetSeries(names);
  for (const std::string& name : names) extras_.erase(name);
  // Entries may name forgotten series: queue afresh.
  silence_queue_ = {};
  for (auto& [name, extras] : extras_) {
    extras.scheduled = false;
    ScheduleSilence(name, &extras);
  }
}

Status ShardState::RestoreSeries(const CheckpointSeries& s, EventTime now,
                                 ReconfigureReport* report) {
  if (Status status = engine_->RestoreSeries(s.name, s.engine_state, report);
      !status.ok())
    return status;
  // Whatever became of the series itself (kept, restarted, dropped), the
  // series that read it as a covariate join its observations as an
  // uninterrupted run would (a reload keeps them too).
  engine_->RestoreCovariateHistory(s.name, s.covariate_history);
  if (!s.has_extras || !engine_->Find(s.name)) return Status::Ok();
  auto it = extras_.emplace(s.name, SeriesExtras{}).first;
  SeriesExtras& extras = it->second;
  extras.readings = s.readings;
  extras.last_time = s.last_time;
  extras.last_value = s.last_value;
  extras.newest = s.newest;
  extras.arrived = now;
  ScheduleSilence(it->first, &extras);
  return Status::Ok();
}

namespace {

class KnownAlertFilter : public AlertPublisher {
 public:
  KnownAlertFilter(std::unordered_set<std::string> known, AlertPublisher* next)
      : known_(std::move(known)), next_(next) {}
  void Publish(std::size_t shard, std::vector<Alert>* alerts) override {
    std::erase_if(*alerts, [this](const Alert& a) { return known_.count(a.id) > 0; });
    if (!alerts->empty()) next_->Publish(shard, alerts);
  }

 private:
  const std::unordered_set<std::string> known_;  // read-only after construction
  AlertPublisher* const next_;
};

}  // namespace

std::unique_ptr<AlertPublisher> MakeKnownAlertFilter(const std::string& alert_log_path,
                                                     AlertPublisher* next,
                                                     std::size_t* known) {
  std::unordered_set<std::string> ids;
  const int fd = ::open(alert_log_path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd >= 0) {
    const off_t size = ::lseek(fd, 0, SEEK_END);
    const off_t from = size > static_cast<off_t>(kKnownAlertBytes)
                           ? size - static_cast<off_t>(kKnownAlertBytes)
                           : 0;
    std::string tail(static_cast<std::size_t>(std::max<off_t>(size - from, 0)), '\0');
    std::size_t got = 0;
    while (got < tail.size()) {
      const ssize_t n = ::pread(fd, tail.data() + got, tail.size() - got, from + static_cast<off_t>(got));
      if (n < 0 && errno == EINTR) continue;
      if (n <= 0) break;
      got += static_cast<std::size_t>(n);
    }
    ::close(fd);
    tail.resize(got);
    constexpr std::string_view kId = "{\"id\":\"";
    for (std::size_t at = tail.find(kId); at != std::string::npos; at = tail.find(kId, at + 1)) {
      const std::size_t begin = at + kId.size();
      const std::size_t end = tail.find('"', begin);
      if (end == std::string::npos) break;
      ids.emplace(tail.substr(begin, end - begin));
    }
  }
  if (known) *known = ids.size();
  return std::make_unique<KnownAlertFilter>(std::move(ids), next);
}

}  // namespace plumbline
