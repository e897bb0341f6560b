#include "daemon/write_ahead_log.h"

#include <unistd.h>

#include <algorithm>
#include <cstdio>
#include <filesystem>

#include "detectors/snapshot.h"

namespace plumbline {
namespace {

constexpr std::size_t kRecordHeader = 8;  // length, CRC

std::uint32_t LoadU32(const char* p) {
  std::uint32_t v = 0;
  for (int i = 0; i < 4; ++i) v |= std::uint32_t{static_cast<std::uint8_t>(p[i])} << (8 * i);
  return v;
}

void StoreU32(std::uint32_t v, std::string* out) {
  for (int i = 0; i < 4; ++i) out->push_back(static_cast<char>(v >> (8 * i)));
}

}  // namespace

WriteAheadLog::WriteAheadLog(std::string directory, FileSystem* file_system, bool sync,
                             std::size_t max_buffer_bytes)
    : directory_(std::move(directory)),
      file_system_(file_system),
      sync_(sync),
      max_buffer_bytes_(max_buffer_bytes) {}

WriteAheadLog::~WriteAheadLog() { Stop(); }

std::string WriteAheadLog::SegmentPath(std::uint64_t first) const {
  char name[40];
  std::snprintf(name, sizeof name, "wal-%020llu.log", static_cast<unsigned long long>(first));
  std::string path = directory_;
  if (!path.empty() && path.back() != '/') path += '/';
  return path + name;
}

std::vector<std::pair<std::uint64_t, std::string>> WriteAheadLog::Segments() const {
  std::vector<std::pair<std::uint64_t, std::string>> out;
  std::error_code error;
  for (const auto& entry : std::filesystem::directory_iterator(directory_, error)) {
    const std::string name = entry.path().filename().string();
    if (name.size() != 28 || name.rfind("wal-", 0) != 0 || name.substr(24) != ".log") continue;
    unsigned long long first = 0;
    if (std::sscanf(name.c_str() + 4, "%20llu", &first) != 1) continue;
    out.emplace_back(first, entry.path().string());
  }
  std::sort(out.begin(), out.end());
  return out;
}

Status WriteAheadLog::Replay(const std::function<void(const WalRecord&)>& each,
                             std::vector<std::string>* problems,
                             std::uint64_t skip_through) {
  std::uint64_t last = 0;
  for (const auto& [first, path] : Segments()) {
    // Mapped, not read into a growing string: a segment can hold minutes of
    // the fastest ingest (140 MB for 4 M readings).
    auto contents = MappedFile::Open(path);
    if (!contents.ok()) {
      return contents.status().code() == Status::Code::kNotFound
                 ? Status::IoError("cannot open " + path + ": it went away")
                 : contents.status();
    }
    std::string_view rest = contents->bytes();
    std::size_t at = 0;
    while (at < rest.size()) {
      const std::size_t left = rest.size() - at;
      if (left < kRecordHeader) {
        if (problems) problems->push_back(path + ": torn record header at byte " + std::to_string(at));
        break;
      }
      const std::uint32_t length = LoadU32(rest.data() + at);
      const std::uint32_t crc = LoadU32(rest.data() + at + 4);
      if (left - kRecordHeader < length) {
        if (problems) problems->push_back(path + ": torn record at byte " + std::to_string(at));
        break;
      }
      const std::string_view payload = rest.substr(at + kRecordHeader, length);
      if (Crc32c(payload) != crc) {
        if (problems) problems->push_back(path + ": checksum mismatch at byte " + std::to_string(at));
        break;
      }
      SnapshotReader r(payload);
      WalRecord record;
      record.sequence = r.U64();
      record.type = static_cast<WalRecord::Type>(r.U8());
      record.stream = r.String();
      // A record the checkpoint holds is checked by its checksum and its
      // mark counted; its readings are the checkpoint's, and not decoded.
      const bool skipped = record.sequence <= skip_through;
      if (record.type == WalRecord::Type::kBatch) {
        if (!skipped) {
          record.readings.resize(r.Count(24));
          for (WalRecord::Reading& reading : record.readings) {
            reading.series = r.String();
            reading.time = r.I64();
            reading.value = r.F64();
          }
        }
      } else if (record.type == WalRecord::Type::kMark ||
                 record.type == WalRecord::Type::kResume) {
        record.lines = r.U64();
      } else {
        r.Fail("unknown record type");
      }
      if (!r.ok() || record.sequence <= last) {
        if (problems) {
          problems->push_back(path + ": bad record at byte " + std::to_string(at) + ": " +
                              (r.ok() ? "sequence out of order" : r.status().message()));
        }
        break;
      }
      last = record.sequence;
      if (record.type == WalRecord::Type::kMark) {
        std::lock_guard<std::mutex> lock(mutex_);
        std::uint64_t& known = streams_[record.stream];
        known = std::max(known, record.lines);
      }
      if (!skipped) each(record);
      at += kRecordHeader + length;
    }
  }
  std::lock_guard<std::mutex> lock(mutex_);
  next_ = std::max(next_, last + 1);
  return Status::Ok();
}

Status WriteAheadLog::Start(std::uint64_t next_sequence) {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    next_ = std::max(next_, next_sequence);
    durable_ = next_ - 1;
  }
  auto file = file_system_->OpenAppend(SegmentPath(next_));
  if (!file.ok()) return file.status();
  file_ = std::move(file).value();
  writer_ = std::thread([this] { Run(); });
  return Status::Ok();
}

void WriteAheadLog::Stop() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    stop_ = true;
  }
  work_.notify_all();
  room_.notify_all();
  if (writer_.joinable()) writer_.join();
  if (file_) {
    (void)file_->Close();
    file_.reset();
  }
}

std::uint64_t WriteAheadLog::Append(std::string payload_tail, std::string_view stream,
                                    WalRecord::Type type) {
  std::uint64_t sequence = 0;
  {
    std::unique_lock<std::mutex> lock(mutex_);
    room_.wait(lock, [this] {
      return buffer_.size() < max_buffer_bytes_ || stop_ || !failure_.ok();
    });
    sequence = next_++;
    if (!failure_.ok()) return sequence;  // never durable: not kept
    SnapshotWriter head;
    head.U64(sequence);
    head.U8(static_cast<std::uint8_t>(type));
    head.String(stream);
    std::string payload = head.Take();
    payload += payload_tail;
    StoreU32(static_cast<std::uint32_t>(payload.size()), &buffer_);
    StoreU32(Crc32c(payload), &buffer_);
    buffer_ += payload;
  }
  work_.notify_one();
  return sequence;
}

std::uint64_t WriteAheadLog::AppendBatch(const ReadingBatch& batch, std::string_view stream) {
  SnapshotWriter w;
  w.U64(batch.entries.size());
  for (const ReadingBatch::Entry& entry : batch.entries) {
    w.String(batch.name(entry));
    w.I64(entry.time);
    w.F64(entry.value);
  }
  return Append(w.Take(), stream, WalRecord::Type::kBatch);
}

std::uint64_t WriteAheadLog::AppendMark(std::string_view stream, std::uint64_t lines) {
  SnapshotWriter w;
  w.U64(lines);
  const std::uint64_t sequence = Append(w.Take(), stream, WalRecord::Type::kMark);
  std::lock_guard<std::mutex> lock(mutex_);
  std::uint64_t& known = streams_[std::string(stream)];
  known = std::max(known, lines);
  return sequence;
}

std::uint64_t WriteAheadLog::AppendResume(std::string_view stream, std::uint64_t lines) {
  SnapshotWriter w;
  w.U64(lines);
  return Append(w.Take(), stream, WalRecord::Type::kResume);
}

std::uint64_t WriteAheadLog::Rotate() {
  std::lock_guard<std::mutex> lock(mutex_);
  if (rotate_first_ == 0) {
    rotate_first_ = next_;
    rotate_offset_ = buffer_.size();
  }
  work_.notify_one();
  return rotate_first_;
}

void WriteAheadLog::Run() {
  // When the last fsync began: the next waits until kMinSyncGap after it,
  // gathering what comes meanwhile (unless the log is stopping).
  std::chrono::steady_clock::time_point last_sync{};
  while (true) {
    std::string chunk;
    std::uint64_t through = 0, rotate_first = 0;
    std::size_t rotate_offset = 0;
    {
      std::unique_lock<std::mutex> lock(mutex_);
      work_.wait(lock, [this] { return !buffer_.empty() || rotate_first_ != 0 || stop_; });
      if (buffer_.empty() && rotate_first_ == 0 && stop_) return;
      if (sync_) {
        work_.wait_until(lock, last_sync + kMinSyncGap, [this] { return stop_; });
        last_sync = std::chrono::steady_clock::now();
      }
      chunk.swap(buffer_);
      room_.notify_all();
      through = next_ - 1;
      rotate_first = rotate_first_;
      rotate_offset = rotate_offset_;
      rotate_first_ = 0;
      rotate_offset_ = 0;
    }
    Status status;
    std::string_view rest = chunk;
    if (rotate_first != 0) {
      status = file_->Append(rest.substr(0, rotate_offset));
      if (status.ok() && sync_) status = file_->Sync();
      if (status.ok()) status = file_->Close();
      if (status.ok()) {
        auto next = file_system_->OpenAppend(SegmentPath(rotate_first));
        if (next.ok()) {
          file_ = std::move(next).value();
        } else {
          status = next.status();
        }
      }
      rest.remove_prefix(rotate_offset);
    }
    if (status.ok() && !rest.empty()) status = file_->Append(rest);
    if (status.ok() && sync_) status = file_->Sync();
    std::vector<std::function<void()>> done;
    {
      std::lock_guard<std::mutex> lock(mutex_);
      if (!status.ok()) {
        if (failure_.ok()) failure_ = status;
        std::string().swap(buffer_);  // nothing more becomes durable
        room_.notify_all();
      } else {
        durable_ = std::max(durable_, through);
        bytes_ += chunk.size();
        ++syncs_;
        std::erase_if(waiting_, [&](auto& entry) {
          if (entry.first > durable_) return false;
          done.push_back(std::move(entry.second));
          return true;
        });
      }
    }
    durable_changed_.notify_all();
    for (auto& callback : done) callback();
    if (!status.ok()) {
      // Sticky: nothing more becomes durable; waiters time out.
      std::unique_lock<std::mutex> lock(mutex_);
      work_.wait(lock, [this] { return stop_; });
      return;
    }
  }
}

bool WriteAheadLog::WaitDurable(std::uint64_t sequence, std::chrono::milliseconds timeout) {
  std::unique_lock<std::mutex> lock(mutex_);
  return durable_changed_.wait_for(lock, timeout, [&] {
    return durable_ >= sequence || !failure_.ok();
  }) && failure_.ok();
}

void WriteAheadLog::OnDurable(std::uint64_t sequence, std::function<void()> done) {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    if (durable_ < sequence) {
      waiting_.emplace_back(sequence, std::move(done));
      return;
    }
  }
  done();
}

void WriteAheadLog::DeleteThrough(std::uint64_t sequence) {
  const auto segments = Segments();
  for (std::size_t i = 0; i + 1 < segments.size(); ++i) {
    if (segments[i + 1].first <= sequence + 1) ::unlink(segments[i].second.c_str());
  }
}

std::uint64_t WriteAheadLog::next_sequence() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return next_;
}

std::uint64_t WriteAheadLog::durable_sequence() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return durable_;
}

Status WriteAheadLog::failure() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return failure_;
}

std::unordered_map<std::string, std::uint64_t> WriteAheadLog::Streams(
    std::uint64_t* through) const {
  std::lock_guard<std::mutex> lock(mutex_);
  if (through) *through = next_ - 1;
  return streams_;
}

void WriteAheadLog::SetStreams(std::unordered_map<std::string, std::uint64_t> streams) {
  std::lock_guard<std::mutex> lock(mutex_);
  streams_ = std::move(streams);
}

void WriteAheadLog::ForgetStream(std::string_view stream) {
  std::lock_guard<std::mutex> lock(mutex_);
  streams_.erase(std::string(stream));
}

std::uint64_t WriteAheadLog::bytes_written() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return bytes_;
}

std::uint64_t WriteAheadLog::syncs() const {
  std::lock_guard<std::mutex> lock(mutex_);
  return syncs_;
}

}  // namespace plumbline
