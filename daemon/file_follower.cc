#include "daemon/file_follower.h"

#include <fcntl.h>
#include <sys/stat.h>
#include <unistd.h>

#include <cerrno>
#include <charconv>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <shared_mutex>
#include <utility>
#include <vector>

#include "daemon/log.h"
#include "daemon/text.h"

namespace plumbline {
namespace {

constexpr std::size_t kChunkBytes = 1 << 20;          // one read
constexpr auto kSaveEvery = std::chrono::seconds(1);  // position writes, at most


bool ParseNumber(std::string_view* text, std::uint64_t* out) {
  while (!text->empty() && text->front() == ' ') text->remove_prefix(1);
  const auto [end, ec] = std::from_chars(text->data(), text->data() + text->size(), *out);
  if (ec != std::errc() || end == text->data()) return false;
  text->remove_prefix(static_cast<std::size_t>(end - text->data()));
  return true;
}

}  // namespace

std::string FormatFollowPosition(const std::string& path, const FollowPosition& p) {
  std::string out = "# plumbline follow position of " + path + ": device inode offset\n";
  out += std::to_string(p.device) + " " + std::to_string(p.inode) + " " +
         std::to_string(p.offset) + "\n";
  return out;
}

std::optional<FollowPosition> ParseFollowPosition(std::string_view text) {
  while (!text.empty() && text.front() == '#') {  // comment lines
    const std::size_t end = text.find('\n');
    if (end == std::string_view::npos) return std::nullopt;
    text.remove_prefix(end + 1);
  }
  FollowPosition p;
  if (!ParseNumber(&text, &p.device) || !ParseNumber(&text, &p.inode) ||
      !ParseNumber(&text, &p.offset)) {
    return std::nullopt;
  }
  if (!text.empty() && text != "\n") return std::nullopt;
  return p;
}

std::string FollowStatePath(const std::string& state_directory, const std::string& path) {
  char name[40];
  std::snprintf(name, sizeof name, "follow-%016llx.offset",
                static_cast<unsigned long long>(Fnv1a(path)));
  std::string out = state_directory;
  if (!out.empty() && out.back() != '/') out += '/';
  return out + name;
}

std::string FollowStreamName(const FollowStream& stream) {
  return "file:" + std::to_string(stream.device) + ":" + std::to_string(stream.inode) + ":" +
         std::to_string(stream.epoch) + " " + stream.path;
}

std::optional<FollowStream> ParseFollowStreamName(std::string_view name) {
  constexpr std::string_view kPrefix = "file:";
  if (name.substr(0, kPrefix.size()) != kPrefix) return std::nullopt;
  name.remove_prefix(kPrefix.size());
  FollowStream stream;
  for (std::uint64_t* field : {&stream.device, &stream.inode, &stream.epoch}) {
    const auto [end, ec] = std::from_chars(name.data(), name.data() + name.size(), *field);
    if (ec != std::errc() || end == name.data() || end == name.data() + name.size()) {
      return std::nullopt;
    }
    const char separator = field == &stream.epoch ? ' ' : ':';
    if (*end != separator) return std::nullopt;
    name.remove_prefix(static_cast<std::size_t>(end - name.data()) + 1);
  }
  if (name.empty()) return std::nullopt;
  stream.path = std::string(name);
  return stream;
}

FileFollower::FileFollower(FileInputOptions options, std::string state_directory,
                           ShardSet* shards, FileSystem* file_system,
                           PipelineObserver* observer)
    : options_(std::move(options)),
      state_path_(FollowStatePath(state_directory, options_.path)),
      shards_(shards),
      file_system_(file_system),
      observer_(observer) {}

FileFollower::~FileFollower() { Stop(); }

void FileFollower::Start() {
  auto text = file_system_->ReadFile(state_path_);
  if (text.ok()) {
    saved_ = ParseFollowPosition(*text);
    if (!saved_) {
      LogWarning("unreadable follow position; reading the file from its start",
                 {{"input", "file"}, {"path", options_.path}, {"state", state_path_}});
    }
  } else if (text.status().code() != Status::Code::kNotFound) {
    LogWarning(
        "cannot read follow position; reading the file from its start",
        {{"input", "file"}, {"path", options_.path}, {"error", text.status().message()}});
  }
  router_ = std::make_unique<ShardRouter>(shards_, nullptr, nullptr, "file");
  NewParser();
  thread_ = std::thread([this] { Run(); });
}

void FileFollower::Stop() {
  {
    std::lock_guard<std::mutex> lock(mutex_);
    if (stop_ && !thread_.joinable()) return;
    stop_ = true;
  }
  wake_.notify_all();
  if (thread_.joinable()) thread_.join();
}

void FileFollower::NewParser() {
  parser_ = std::make_unique<ReadingParser>(
      ReadingParserOptions{},
      [this](const Reading& reading) {
        router_->Add(reading, parser_->line_number());
        readings_.fetch_add(1, std::memory_order_relaxed);
      },
      [this](std::uint64_t line, ReadingError reason, std::string_view detail) {
        rejected_.fetch_add(1, std::memory_order_relaxed);
        if (observer_) observer_->OnParseRejected(reason, 1);
        if (++logged_rejections_ <= kLoggedRejections) {
          LogWarning("line refused", {{"input", "file"},
                                      {"path", options_.path},
                                      {"line", line},
                                      {"from_offset", position_.offset},
                                      {"reason", ToString(reason)},
                                      {"detail", detail}});
        } else if (logged_rejections_ == kLoggedRejections + 1) {
          LogWarning("more lines refused; counting them without logging each",
                     {{"input", "file"}, {"path", options_.path}});
        }
      });
}

bool FileFollower::OpenCurrent(bool use_saved) {
  const int fd = ::open(options_.path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) {
    if (!status_logged_) {
      status_logged_ = true;
      LogWarning(
          "file to follow is not there yet; waiting for it",
          {{"input", "file"}, {"path", options_.path}, {"error", std::strerror(errno)}});
    }
    return false;
  }
  struct stat info {};
  ::fstat(fd, &info);
  fd_ = fd;
  position_ = {static_cast<std::uint64_t>(info.st_dev),
               static_cast<std::uint64_t>(info.st_ino), 0};
  const auto size = static_cast<std::uint64_t>(info.st_size);
  std::string_view from = "start";
  const std::optional<std::uint64_t> resumed = wal_ ? ResumeFromLog(size) : std::nullopt;
  if (resumed) {
    position_.offset = *resumed;
    from = *resumed > 0 ? "checkpointed offset"
                        : "start (new, replaced or truncated file, or nothing of it read)";
  } else if (use_saved && saved_) {
    if (saved_->device == position_.device && saved_->inode == position_.inode &&
        size >= saved_->offset) {
      position_.offset = saved_->offset;
      from = "saved offset";
    } else {
      from = "start (replaced or truncated while stopped)";
    }
  } else if (use_saved && options_.start_at == StartAt::kEnd) {
    position_.offset = size;
    from = "end";
  }
  if (wal_ && !resumed) BeginStream(0, position_.offset);
  ::lseek(fd_, static_cast<off_t>(position_.offset), SEEK_SET);
  committed_.store(position_.offset);
  status_logged_ = false;
  LogInfo("following file", {{"input", "file"},
                             {"path", options_.path},
                             {"from", from},
                             {"offset", position_.offset},
                             {"size", size}});
  return true;
}

bool FileFollower::OpenRotatedAway() {
  // Where the state left off: the log's stream of the path, or the offset file.
  std::optional<FollowPosition> last;
  std::uint64_t epoch = 0;
  if (wal_) {
    for (const auto& [stream, offset] : PathStreams()) {
      if (last && stream.epoch < epoch) continue;
      last = FollowPosition{stream.device, stream.inode, offset};
      epoch = stream.epoch;
    }
  } else {
    last = saved_;
  }
  if (!last) return false;
  struct stat by_path {};
  if (::stat(options_.path.c_str(), &by_path) == 0 &&
      static_cast<std::uint64_t>(by_path.st_dev) == last->device &&
      static_cast<std::uint64_t>(by_path.st_ino) == last->inode) {
    return false;  // the same file: resumed as usual
  }
  std::error_code error;
  std::filesystem::path folder = std::filesystem::path(options_.path).parent_path();
  if (folder.empty()) folder = ".";
  std::string old_path;
  // Error codes throughout: a folder that changes under the scan ends it.
  for (std::filesystem::directory_iterator it(folder, error), end; !error && it != end;
       it.increment(error)) {
    struct stat info {};
    if (::stat(it->path().c_str(), &info) != 0 || !S_ISREG(info.st_mode)) continue;
    if (static_cast<std::uint64_t>(info.st_dev) == last->device &&
        static_cast<std::uint64_t>(info.st_ino) == last->inode &&
        static_cast<std::uint64_t>(info.st_size) > last->offset) {
      old_path = it->path().string();
      break;
    }
  }
  if (old_path.empty()) return false;
  const int fd = ::open(old_path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) return false;
  fd_ = fd;
  position_ = *last;
  if (wal_) BeginStream(epoch, last->offset);
  ::lseek(fd_, static_cast<off_t>(position_.offset), SEEK_SET);
  committed_.store(position_.offset);
  LogInfo("path rotated while stopped; finishing the old file first",
          {{"input", "file"},
           {"path", options_.path},
           {"old_file", old_path},
           {"offset", position_.offset}});
  return true;
}

std::vector<std::pair<FollowStream, std::uint64_t>> FileFollower::PathStreams() const {
  std::vector<std::pair<FollowStream, std::uint64_t>> out;
  for (const auto& [name, offset] : wal_->Streams(nullptr)) {
    auto stream = ParseFollowStreamName(name);
    if (stream && stream->path == options_.path) out.emplace_back(std::move(*stream), offset);
  }
  return out;
}

std::optional<std::uint64_t> FileFollower::ResumeFromLog(std::uint64_t size) {
  const auto streams = PathStreams();
  if (streams.empty()) return std::nullopt;
  std::optional<std::pair<FollowStream, std::uint64_t>> latest;  // this file's newest epoch
  for (const auto& [stream, offset] : streams) {
    if (stream.device != position_.device || stream.inode != position_.inode) continue;
    if (!latest || stream.epoch > latest->first.epoch) latest.emplace(stream, offset);
  }
  if (!latest) {  // the path names another file now
    BeginStream(0, 0);
    return 0;
  }
  if (latest->second > size) {  // truncated while stopped
    BeginStream(latest->first.epoch + 1, 0);
    return 0;
  }
  BeginStream(latest->first.epoch, latest->second);
  return latest->second;
}

void FileFollower::BeginStream(std::uint64_t epoch, std::uint64_t offset) {
  stream_ = FollowStream{position_.device, position_.inode, epoch, options_.path};
  stream_name_ = FollowStreamName(stream_);
  marked_ = offset;
  router_->set_stream(stream_name_);
  // The path's other streams (files it named before, earlier epochs) are done.
  for (const auto& entry : wal_->Streams(nullptr)) {
    auto stream = ParseFollowStreamName(entry.first);
    if (stream && stream->path == options_.path && entry.first != stream_name_) {
      wal_->ForgetStream(entry.first);
    }
  }
  // Batches an earlier run pushed after its last mark were never covered by
  // one: the resume keeps a replay from taking them (the lines are read again).
  wal_->AppendResume(stream_name_, offset);
}

bool FileFollower::Deliver(std::string_view bytes, bool finish) {
  std::shared_lock<std::shared_mutex> gate;  // pushes and their mark together
  if (wal_) gate = std::shared_lock<std::shared_mutex>(wal_->stream_gate());
  if (!bytes.empty()) parser_->Feed(bytes);
  if (finish) parser_->Finish();
  const bool ok = router_->Flush();
  const std::uint64_t committed = position_.offset - (finish ? 0 : parser_->pending_bytes());
  committed_.store(committed);
  if (wal_ && ok && committed != marked_) {
    wal_->AppendMark(stream_name_, committed);
    marked_ = committed;
  }
  return ok;
}

void FileFollower::CloseFile() {
  if (fd_ >= 0) ::close(fd_);
  fd_ = -1;
}

bool FileFollower::ReadAvailable() {
  std::vector<char> buffer(kChunkBytes);
  while (true) {
    {
      std::lock_guard<std::mutex> lock(mutex_);
      if (stop_) return true;
    }
    const ssize_t n = ::read(fd_, buffer.data(), buffer.size());
    if (n < 0) {
      if (errno == EINTR) continue;
      LogWarning(
          "read failed; retrying at the next poll",
          {{"input", "file"}, {"path", options_.path}, {"error", std::strerror(errno)}});
      return true;
    }
    if (n == 0) return true;
    position_.offset += static_cast<std::uint64_t>(n);
    if (!Deliver(std::string_view(buffer.data(), static_cast<std::size_t>(n)), false)) {
      return false;
    }
  }
}

void FileFollower::SavePosition(bool force) {
  if (fd_ < 0) return;
  FollowPosition now = position_;
  now.offset = committed_.load();
  if (saved_ && saved_->device == now.device && saved_->inode == now.inode &&
      saved_->offset == now.offset) {
    return;
  }
  const auto clock_now = std::chrono::steady_clock::now();
  if (!force && clock_now - last_save_ < kSaveEvery) return;
  last_save_ = clock_now;
  Status status =
      file_system_->ReplaceFile(state_path_, FormatFollowPosition(options_.path, now));
  if (!status.ok()) {
    LogWarning("cannot save follow position (a restart would re-read or skip lines)",
               {{"input", "file"}, {"path", options_.path}, {"error", status.message()}});
    if (observer_) observer_->OnSinkFailure("follow_position");
    return;
  }
  saved_ = now;
}

void FileFollower::Run() {
  bool first_open = true;
  const auto poll = std::chrono::microseconds(options_.poll_interval);
  while (true) {
    {
      std::lock_guard<std::mutex> lock(mutex_);
      if (stop_) break;
    }
    if (fd_ < 0 && ((first_open && OpenRotatedAway()) || OpenCurrent(first_open))) {
      first_open = false;
    }
    if (fd_ >= 0) {
      if (!ReadAvailable()) break;  // the shards stopped taking input
      struct stat by_path {
      }, by_fd{};
      const bool path_exists = ::stat(options_.path.c_str(), &by_path) == 0;
      ::fstat(fd_, &by_fd);
      if (path_exists &&
          (static_cast<std::uint64_t>(by_path.st_dev) != position_.device ||
           static_cast<std::uint64_t>(by_path.st_ino) != position_.inode)) {
        // Rotated: the old file is complete; its last line counts.
        ReadAvailable();
        Deliver({}, true);
        LogInfo("file rotated; following the new one",
                {{"input", "file"},
                 {"path", options_.path},
                 {"old_offset", position_.offset}});
        CloseFile();
        NewParser();
        reopened_.fetch_add(1);
        if (OpenCurrent(false)) SavePosition(true);
        continue;
      }
      if (static_cast<std::uint64_t>(by_fd.st_size) < position_.offset) {
        LogWarning("file truncated; reading it again from its start",
                   {{"input", "file"},
                    {"path", options_.path},
                    {"old_offset", position_.offset},
                    {"size", static_cast<std::uint64_t>(by_fd.st_size)}});
        ::lseek(fd_, 0, SEEK_SET);
        position_.offset = 0;
        committed_.store(0);
        if (wal_) BeginStream(stream_.epoch + 1, 0);
        NewParser();
        reopened_.fetch_add(1);
        SavePosition(true);
        continue;
      }
      SavePosition(false);
    }
    std::unique_lock<std::mutex> lock(mutex_);
    wake_.wait_for(lock, poll, [this] { return stop_; });
  }
  router_->Flush();
  SavePosition(true);
  CloseFile();
}

}  // namespace plumbline
