// Inputs (daemon/file_follower.h, daemon/tcp_listener.h): the follower reads a
// growing file, survives rotation and truncation and resumes from its saved
// offset; the TCP listener takes readings from many connections at once,
// refuses bad and over-long lines without closing the connection, and closes
// idle ones. The rules are the headers' and DESIGN.md's ("Readings"); common
// practice, no published source. Waits poll for an outcome with a generous
// bound; nothing here measures speed.
#include <gtest/gtest.h>
#include <unistd.h>

#include <utility>
#include <atomic>
#include <boost/asio/connect.hpp>
#include <boost/asio/io_context.hpp>
#include <boost/asio/ip/tcp.hpp>
#include <boost/asio/read.hpp>
#include <boost/asio/write.hpp>
#include <chrono>
#include <condition_variable>
#include <cstdio>
#include <filesystem>
#include <fstream>
#include <functional>
#include <map>
#include <memory>
#include <mutex>
#include <string>
#include <thread>
#include <vector>

#include "config/config.h"
#include "daemon/file_follower.h"
#include "daemon/tcp_listener.h"
#include "daemon/write_ahead_log.h"
#include "detectors/time_format.h"
#include "tests/support/interposed_file_system.h"
#include "tests/support/temp_dir.h"

namespace plumbline {
namespace {

namespace asio = boost::asio;
using tcp = asio::ip::tcp;

// Polls `done` every millisecond for up to 20 s.
bool WaitFor(const std::function<bool()>& done) {
  for (int i = 0; i < 20000; ++i) {
    if (done()) return true;
    std::this_thread::sleep_for(std::chrono::milliseconds(1));
  }
  return done();
}

std::string TempDir(const std::string& name) {
  return test_support::FreshTempDir("inputs_" + name);
}

// Counts parse refusals by reason.
class CountingObserver : public PipelineObserver {
 public:
  void OnParseRejected(ReadingError reason, std::uint64_t n) override {
    std::lock_guard<std::mutex> lock(mutex_);
    refused_[std::string(ToString(reason))] += n;
  }
  std::uint64_t Refused(const std::string& reason) {
    std::lock_guard<std::mutex> lock(mutex_);
    return refused_[reason];
  }
  void OnConnectionDropped(std::string_view input, std::string_view reason) override {
    std::lock_guard<std::mutex> lock(mutex_);
    dropped_[std::string(input) + "/" + std::string(reason)] += 1;
  }
  std::uint64_t Dropped(const std::string& input_and_reason) {
    std::lock_guard<std::mutex> lock(mutex_);
    return dropped_[input_and_reason];
  }
  void OnOverloaded(std::string_view input) override {
    std::lock_guard<std::mutex> lock(mutex_);
    overloaded_[std::string(input)] += 1;
  }
  std::uint64_t Overloaded(const std::string& input) {
    std::lock_guard<std::mutex> lock(mutex_);
    return overloaded_[input];
  }

 private:
  std::mutex mutex_;
  std::map<std::string, std::uint64_t> refused_;
  std::map<std::string, std::uint64_t> dropped_;
  std::map<std::string, std::uint64_t> overloaded_;
};

// Shards that accept any series; the test reads what reached them.
class Pipeline {
 public:
  explicit Pipeline(std::size_t shards = 2) {
    auto config =
        LoadConfigText("series:\n  - seasons: []\n    warmup: 20\n", "test.yaml");
    EXPECT_TRUE(config.ok());
    set_ = std::make_unique<ShardSet>(shards, *config, ShardOptions{}, &clock_, nullptr,
                                      &observer_);
    set_->Start();
  }
  ~Pipeline() { set_->CloseAndJoin(); }
  ShardSet* shards() { return set_.get(); }
  CountingObserver* observer() { return &observer_; }
  std::uint64_t Processed() {
    std::uint64_t n = 0;
    for (std::size_t i = 0; i < set_->size(); ++i) n += set_->shard(i).processed();
    return n;
  }
  // Accepted readings per series, asked on the shard threads.
  long long Readings(const std::string& series) {
    auto n = set_->shard(set_->ShardFor(series))
                 .Ask<long long>(
                     [series](ShardState& s) {
                       const SeriesExtras* e = s.Find(series);
                       return e ? e->readings : 0LL;
                     },
                     std::chrono::seconds(10));
    return n.value_or(-1);
  }

 private:
  ManualClock clock_;
  CountingObserver observer_;
  std::unique_ptr<ShardSet> set_;
};

std::string Lines(const std::string& series, int from, int count) {
  std::string text;
  for (int i = from; i < from + count; ++i) {
    text += FormatRfc3339((1'772'323'200LL + 60 * i) * kMicrosPerSecond) + "," + series +
            "," + std::to_string(i % 10) + "\n";
  }
  return text;
}

void Append(const std::string& path, const std::string& text) {
  std::ofstream file(path, std::ios::app | std::ios::binary);
  file << text;
}

FileInputOptions Follow(const std::string& path) {
  FileInputOptions o;
  o.path = path;
  o.poll_interval = 2000;  // 2 ms
  return o;
}

TEST(FollowPositionTest, RoundTripsAndRefusesGarbage) {
  const FollowPosition p{2049, 1234567, 987654321};
  auto back = ParseFollowPosition(FormatFollowPosition("/var/log/a.csv", p));
  ASSERT_TRUE(back);
  EXPECT_EQ(back->device, p.device);
  EXPECT_EQ(back->inode, p.inode);
  EXPECT_EQ(back->offset, p.offset);
  EXPECT_FALSE(ParseFollowPosition("1 2\n"));
  EXPECT_FALSE(ParseFollowPosition("1 2 x\n"));
  EXPECT_FALSE(ParseFollowPosition("1 2 3 4\n"));
  EXPECT_FALSE(ParseFollowPosition("# only a comment"));
  EXPECT_NE(FollowStatePath("/s", "/a.csv"), FollowStatePath("/s", "/b.csv"));
  EXPECT_EQ(FollowStatePath("/s", "/a.csv").rfind("/s/follow-", 0), 0u);
}

TEST(FileFollowerTest, ReadsAGrowingFileLineByLineIncludingAPartialLineLater) {
  Pipeline pipeline;
  const std::string dir = TempDir("grow");
  const std::string path = dir + "/readings.csv";
  Append(path, "time,series,value\n" + Lines("a", 0, 100));
  FileFollower follower(Follow(path), dir, pipeline.shards(), FileSystem::Default(),
                        nullptr);
  follower.Start();
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 100; }));
  // Half a line is held until its end arrives.
  const std::string next = Lines("a", 100, 1);
  Append(path, next.substr(0, 10));
  Append(path, next.substr(10) + Lines("a", 101, 49));
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 150; }));
  EXPECT_EQ(pipeline.Readings("a"), 150);
  EXPECT_EQ(follower.rejected_lines(), 0u);
  follower.Stop();
}

TEST(FileFollowerTest, FollowsTheNewFileAfterRotationWithoutLosingTheOldTail) {
  Pipeline pipeline;
  const std::string dir = TempDir("rotate");
  const std::string path = dir + "/readings.csv";
  Append(path, Lines("a", 0, 50));
  FileFollower follower(Follow(path), dir, pipeline.shards(), FileSystem::Default(),
                        nullptr);
  follower.Start();
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 50; }));
  // The writer adds a last line without its newline, the file is rotated,
  // and a new one is started.
  const std::string last = Lines("a", 50, 1);
  Append(path, last.substr(0, last.size() - 1));
  std::filesystem::rename(path, path + ".1");
  Append(path, Lines("a", 51, 30));
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 81; }));
  EXPECT_EQ(pipeline.Readings("a"), 81);
  EXPECT_EQ(follower.reopened(), 1u);
  follower.Stop();
}

TEST(FileFollowerTest, StartsAgainFromTheTopAfterTruncation) {
  Pipeline pipeline;
  const std::string dir = TempDir("truncate");
  const std::string path = dir + "/readings.csv";
  Append(path, Lines("a", 0, 40));
  FileFollower follower(Follow(path), dir, pipeline.shards(), FileSystem::Default(),
                        nullptr);
  follower.Start();
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 40; }));
  std::filesystem::resize_file(path, 0);
  ASSERT_TRUE(WaitFor([&] { return follower.reopened() == 1; }));
  Append(path, Lines("b", 0, 10));
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 50; }));
  EXPECT_EQ(pipeline.Readings("b"), 10);
  follower.Stop();
}

TEST(FileFollowerTest, ResumesFromItsSavedOffsetAfterARestart) {
  const std::string dir = TempDir("resume");
  const std::string path = dir + "/readings.csv";
  const std::string line60 = Lines("a", 60, 1);
  Append(path, Lines("a", 0, 60) + line60.substr(0, line60.size() - 3));  // unfinished
  {
    Pipeline pipeline;
    FileFollower follower(Follow(path), dir, pipeline.shards(), FileSystem::Default(),
                          nullptr);
    follower.Start();
    ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 60; }));
    follower.Stop();
  }
  // The saved offset is that of the last complete line.
  auto saved = FileSystem::Default()->ReadFile(FollowStatePath(dir, path));
  ASSERT_TRUE(saved.ok());
  auto position = ParseFollowPosition(*saved);
  ASSERT_TRUE(position);
  EXPECT_EQ(position->offset, Lines("a", 0, 60).size());
  Append(path, line60.substr(line60.size() - 3) + Lines("a", 61, 9));
  Pipeline pipeline;
  FileFollower follower(Follow(path), dir, pipeline.shards(), FileSystem::Default(),
                        nullptr);
  follower.Start();
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 10; }));
  EXPECT_EQ(pipeline.Readings("a"), 10);  // the 10 new lines, none of the 60 old
  follower.Stop();
}

TEST(FollowStreamTest, NamesRoundTripAndOthersAreNotFollowStreams) {
  const FollowStream stream{2049, 1234567, 3, "/var/spool/plumbline/a b.csv"};
  const std::string name = FollowStreamName(stream);
  auto back = ParseFollowStreamName(name);
  ASSERT_TRUE(back);
  EXPECT_EQ(back->device, stream.device);
  EXPECT_EQ(back->inode, stream.inode);
  EXPECT_EQ(back->epoch, stream.epoch);
  EXPECT_EQ(back->path, stream.path);
  EXPECT_FALSE(ParseFollowStreamName("harbourside-feed"));
  EXPECT_FALSE(ParseFollowStreamName("file:1:2:3"));  // no path
  EXPECT_FALSE(ParseFollowStreamName("file:1:2 /a.csv"));
  EXPECT_FALSE(ParseFollowStreamName("file:1:x:3 /a.csv"));
}

// The follow streams the log's table holds for `path`: name -> offset.
std::map<std::string, std::uint64_t> FollowStreams(const WriteAheadLog& wal,
                                                   const std::string& path) {
  std::map<std::string, std::uint64_t> out;
  for (const auto& [name, offset] : wal.Streams(nullptr)) {
    auto stream = ParseFollowStreamName(name);
    if (stream && stream->path == path) out[name] = offset;
  }
  return out;
}

std::uint64_t EpochOf(const std::map<std::string, std::uint64_t>& streams) {
  return streams.size() == 1 ? ParseFollowStreamName(streams.begin()->first)->epoch : 99;
}

// POSIX, except that appends wait while held (a disk slower than the readings).
class HeldAppendFileSystem : public test_support::InterposedFileSystem {
 public:
  HeldAppendFileSystem() {
    before_append = [this](std::string_view) {
      std::unique_lock<std::mutex> lock(mutex_);
      ++waiting_;
      // Bounded, so that a broken log fails the test instead of hanging it.
      released_.wait_for(lock, std::chrono::seconds(20), [this] { return !held_; });
      --waiting_;
      return Status::Ok();
    };
  }
  void Hold(bool held) {
    {
      std::lock_guard<std::mutex> lock(mutex_);
      held_ = held;
    }
    released_.notify_all();
  }
  bool Waiting() {
    std::lock_guard<std::mutex> lock(mutex_);
    return waiting_ > 0;
  }

 private:
  std::mutex mutex_;
  std::condition_variable released_;
  bool held_ = false;
  int waiting_ = 0;
};

// The records not yet handed to the disk are bounded: past the bound an
// append waits for the writer (the inputs slow down), and nothing is lost.
TEST(WriteAheadLogTest, AppendsWaitWhileTheUnwrittenRecordsFillTheBound) {
  const std::string dir = TempDir("wal_bound");
  HeldAppendFileSystem fs;
  constexpr int kMarks = 100;
  {
    WriteAheadLog wal(dir, &fs, /*sync=*/false, /*max_buffer_bytes=*/256);
    ASSERT_TRUE(wal.Start(1).ok());
    fs.Hold(true);
    wal.AppendMark("sensor", 1);  // the writer takes it and waits on the disk
    ASSERT_TRUE(WaitFor([&] { return fs.Waiting(); }));
    std::atomic<int> appended{1};
    std::thread producer([&] {
      for (int line = 2; line <= kMarks; ++line) {
        wal.AppendMark("sensor", static_cast<std::uint64_t>(line));
        ++appended;
      }
    });
    std::this_thread::sleep_for(std::chrono::milliseconds(100));
    const int while_held = appended;
    EXPECT_LT(while_held, kMarks);  // waiting, not buffering all of them
    EXPECT_GT(while_held, 2);       // the bound holds several records
    fs.Hold(false);
    producer.join();
    EXPECT_EQ(appended, kMarks);
    EXPECT_TRUE(
        wal.WaitDurable(wal.next_sequence() - 1, std::chrono::milliseconds(20000)));
  }
  WriteAheadLog again(dir, FileSystem::Default(), /*sync=*/false);
  std::vector<std::uint64_t> lines;
  std::vector<std::string> problems;
  ASSERT_TRUE(
      again.Replay([&](const WalRecord& r) { lines.push_back(r.lines); }, &problems)
          .ok());
  EXPECT_TRUE(problems.empty());
  ASSERT_EQ(lines.size(), static_cast<std::size_t>(kMarks));
  for (int i = 0; i < kMarks; ++i) EXPECT_EQ(lines[i], static_cast<std::uint64_t>(i + 1));
}

// A restart replays only what its checkpoint lacks: records up to the
// checkpoint's sequence are checked and their marks counted, but not handed on.
TEST(WriteAheadLogTest, ReplaySkipsTheRecordsACheckpointHoldsButCountsTheirMarks) {
  const std::string dir = TempDir("wal_skip");
  std::uint64_t covered = 0;
  {
    WriteAheadLog wal(dir, FileSystem::Default(), /*sync=*/false);
    ASSERT_TRUE(wal.Start(1).ok());
    for (int i = 0; i < 6; ++i) {
      ReadingBatch batch;
      batch.Add({60 * kMicrosPerSecond * (i + 1), "coldstore/a", 1.0 * i}, 1);
      wal.AppendBatch(batch, "sensor");
      const std::uint64_t mark =
          wal.AppendMark("sensor", static_cast<std::uint64_t>(i + 1));
      if (i == 3) covered = mark;  // a checkpoint holds the first four batches
    }
    ASSERT_TRUE(
        wal.WaitDurable(wal.next_sequence() - 1, std::chrono::milliseconds(20000)));
    wal.Stop();
  }
  WriteAheadLog again(dir, FileSystem::Default(), /*sync=*/false);
  std::vector<std::uint64_t> sequences;
  std::vector<double> values;
  std::vector<std::string> problems;
  ASSERT_TRUE(again
                  .Replay(
                      [&](const WalRecord& r) {
                        sequences.push_back(r.sequence);
                        for (const WalRecord::Reading& reading : r.readings) {
                          values.push_back(reading.value);
                        }
                      },
                      &problems, covered)
                  .ok());
  EXPECT_TRUE(problems.empty());
  ASSERT_EQ(sequences.size(), 4u);  // two batches and their marks
  EXPECT_EQ(sequences.front(), covered + 1);
  EXPECT_EQ(values, (std::vector<double>{4.0, 5.0}));
  std::uint64_t through = 0;
  const auto streams = again.Streams(&through);
  ASSERT_EQ(streams.count("sensor"), 1u);
  EXPECT_EQ(streams.at("sensor"), 6u);
  // Without a checkpoint every record comes back.
  WriteAheadLog whole(dir, FileSystem::Default(), /*sync=*/false);
  std::size_t records = 0;
  ASSERT_TRUE(whole.Replay([&](const WalRecord&) { ++records; }, &problems).ok());
  EXPECT_EQ(records, 12u);
}

TEST(FileFollowerTest, WithALogTheOffsetIsItsStreamMarkAcrossRestartsTruncationAndReplacement) {
  const std::string dir = TempDir("logged");
  const std::string path = dir + "/readings.csv";
  // The log's stream table is what a restart restores from the checkpoint
  // and the log's marks; one log object stands for it across the followers.
  WriteAheadLog wal(dir, FileSystem::Default(), /*sync=*/false);
  ASSERT_TRUE(wal.Start(1).ok());
  const std::string line60 = Lines("a", 60, 1);
  Append(path, Lines("a", 0, 60) + line60.substr(0, line60.size() - 3));  // unfinished
  auto run = [&](const std::function<void(Pipeline&, FileFollower&)>& body) {
    Pipeline pipeline;
    FileFollower follower(Follow(path), dir, pipeline.shards(), FileSystem::Default(),
                          nullptr);
    follower.set_write_ahead_log(&wal);
    follower.Start();
    body(pipeline, follower);
    follower.Stop();
  };
  run([](Pipeline& pipeline, FileFollower&) {
    ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 60; }));
  });
  // One stream for the file, marked at the end of its last complete line.
  auto streams = FollowStreams(wal, path);
  ASSERT_EQ(streams.size(), 1u);
  EXPECT_EQ(streams.begin()->second, Lines("a", 0, 60).size());
  EXPECT_EQ(EpochOf(streams), 0u);
  // Restart: the offset comes from the table, not the offset file.
  std::filesystem::remove(FollowStatePath(dir, path));
  Append(path, line60.substr(line60.size() - 3) + Lines("a", 61, 9));
  run([&](Pipeline& pipeline, FileFollower& follower) {
    ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 10; }));
    EXPECT_EQ(pipeline.Readings("a"), 10);  // the 10 new lines, none of the 60 old
    // Truncated while followed: a new epoch, marked from the top.
    std::filesystem::resize_file(path, 0);
    ASSERT_TRUE(WaitFor([&] { return follower.reopened() == 1; }));
    Append(path, Lines("b", 0, 10));
    ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 20; }));
    ASSERT_TRUE(WaitFor([&] { return follower.committed_offset() == Lines("b", 0, 10).size(); }));
  });
  streams = FollowStreams(wal, path);
  ASSERT_EQ(streams.size(), 1u);  // the older epoch is forgotten
  EXPECT_EQ(EpochOf(streams), 1u);
  EXPECT_EQ(streams.begin()->second, Lines("b", 0, 10).size());
  // Truncated while stopped (shorter than the mark): read from the top again.
  std::filesystem::resize_file(path, 0);
  Append(path, Lines("c", 0, 3));
  run([](Pipeline& pipeline, FileFollower&) {
    ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 3; }));
    EXPECT_EQ(pipeline.Readings("c"), 3);
  });
  EXPECT_EQ(EpochOf(FollowStreams(wal, path)), 2u);
  // Replaced while stopped: another file under the path, read from its start.
  Append(path + ".new", Lines("d", 0, 7));
  std::filesystem::rename(path + ".new", path);
  run([](Pipeline& pipeline, FileFollower&) {
    ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 7; }));
    EXPECT_EQ(pipeline.Readings("d"), 7);
  });
  streams = FollowStreams(wal, path);
  ASSERT_EQ(streams.size(), 1u);
  EXPECT_EQ(EpochOf(streams), 0u);
  EXPECT_EQ(streams.begin()->second, Lines("d", 0, 7).size());
  wal.Stop();
}

// Rotated while the daemon was down (renamed to readings.csv.1, a new file
// created): the old file's tail past the saved offset is read first, then the
// new file from its start; nothing is lost or taken twice. With the log's
// stream table and with the offset file alone.
TEST(FileFollowerTest, FinishesAFileRotatedAwayWhileStoppedBeforeTheNewOne) {
  for (const bool logged : {true, false}) {
    const std::string dir = TempDir(logged ? "rotated_logged" : "rotated_plain");
    const std::string path = dir + "/readings.csv";
    WriteAheadLog wal(dir, FileSystem::Default(), /*sync=*/false);
    if (logged) {
      ASSERT_TRUE(wal.Start(1).ok());
    }
    auto run = [&](std::uint64_t expected, const std::function<void(Pipeline&)>& check) {
      Pipeline pipeline;
      FileFollower follower(Follow(path), dir, pipeline.shards(), FileSystem::Default(),
                            nullptr);
      if (logged) follower.set_write_ahead_log(&wal);
      follower.Start();
      ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == expected; }))
          << pipeline.Processed() << " of " << expected << (logged ? " (logged)" : "");
      check(pipeline);
      follower.Stop();
    };
    Append(path, Lines("a", 0, 20));
    run(20, [](Pipeline&) {});
    // While stopped: 5 more lines in the old file (the last without its
    // newline), then it is renamed away and a new file takes the path.
    const std::string line24 = Lines("a", 24, 1);
    Append(path, Lines("a", 20, 4) + line24.substr(0, line24.size() - 1));
    std::filesystem::rename(path, path + ".1");
    Append(path, Lines("b", 0, 8));
    run(13, [](Pipeline& pipeline) {
      EXPECT_EQ(pipeline.Readings("a"), 5);  // the old file's tail, its last line too
      EXPECT_EQ(pipeline.Readings("b"), 8);  // then all of the new file
    });
    // The rotated file is done: a further restart takes nothing from it.
    Append(path, Lines("b", 8, 2));
    run(2, [](Pipeline& pipeline) { EXPECT_EQ(pipeline.Readings("b"), 2); });
    if (logged) wal.Stop();
  }
}

TEST(FileFollowerTest, StartAtEndSkipsWhatIsAlreadyThereOnAFirstRun) {
  Pipeline pipeline;
  const std::string dir = TempDir("end");
  const std::string path = dir + "/readings.csv";
  Append(path, Lines("a", 0, 30));
  FileInputOptions options = Follow(path);
  options.start_at = StartAt::kEnd;
  FileFollower follower(options, dir, pipeline.shards(), FileSystem::Default(), nullptr);
  follower.Start();
  ASSERT_TRUE(WaitFor([&] { return follower.committed_offset() > 0; }));
  Append(path, Lines("a", 30, 5));
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 5; }));
  follower.Stop();
}

TEST(FileFollowerTest, WaitsForAFileThatDoesNotExistYet) {
  Pipeline pipeline;
  const std::string dir = TempDir("later");
  const std::string path = dir + "/readings.csv";
  FileFollower follower(Follow(path), dir, pipeline.shards(), FileSystem::Default(),
                        nullptr);
  follower.Start();
  std::this_thread::sleep_for(std::chrono::milliseconds(20));
  Append(path, Lines("a", 0, 7));
  ASSERT_TRUE(WaitFor([&] { return pipeline.Processed() == 7; }));
  follower.Stop();
}

// ---- the ingest budget ----

TEST(IngestBudgetTest, TryAcquireRefusesBeyondTheBoundAndCountsTheOverload) {
  CountingObserver observer;
  IngestBudget budget(1000, &observer);
  EXPECT_TRUE(budget.TryAcquire(600, "http"));
  EXPECT_FALSE(budget.TryAcquire(600, "http"));
  EXPECT_EQ(observer.Overloaded("http"), 1u);
  {
    IngestLease lease(&budget, 400);  // what TryAcquire took is given back by a lease
    EXPECT_TRUE(budget.TryAcquire(400, "http"));
  }
  EXPECT_EQ(budget.used(), 600u);
  budget.Release(600);
  EXPECT_EQ(budget.used(), 0u);
  // A request larger than the whole budget takes all of it, and only then.
  EXPECT_TRUE(budget.TryAcquire(5000, "http"));
  EXPECT_EQ(budget.used(), 1000u);
  budget.Release(5000);
  EXPECT_EQ(budget.used(), 0u);
}

TEST(IngestBudgetTest, AcquireWaitsUntilBytesAreGivenBack) {
  CountingObserver observer;
  IngestBudget budget(100, &observer);
  budget.Acquire(100, "tcp");
  std::atomic<bool> taken{false};
  std::thread waiter([&] {
    budget.Acquire(50, "tcp");
    taken = true;
  });
  ASSERT_TRUE(WaitFor([&] { return observer.Overloaded("tcp") == 1; }));
  EXPECT_FALSE(taken.load());
  budget.Release(100);
  waiter.join();
  EXPECT_TRUE(taken.load());
  EXPECT_EQ(budget.used(), 50u);
}

// ---- TCP ----

class TcpFixture : public testing::Test {
 protected:
  void StartListener(TcpListenerOptions options, TcpIngestRules rules = {}) {
    options.port = 0;
    listener_ = std::make_unique<TcpListener>(io_, options, pipeline_.shards(),
                                              pipeline_.observer(), rules);
    ASSERT_TRUE(listener_->Start().ok());
    work_.emplace(asio::make_work_guard(io_));
    thread_ = std::thread([this] { io_.run(); });
  }
  void TearDown() override {
    if (listener_) listener_->Stop();
    WaitFor([&] { return !listener_ || listener_->open_connections() == 0; });
    work_.reset();
    io_.stop();
    if (thread_.joinable()) thread_.join();
  }
  tcp::socket Connect() {
    tcp::socket socket(client_io_);
    socket.connect(listener_->local_endpoint());
    return socket;
  }

  Pipeline pipeline_;
  asio::io_context io_;
  asio::io_context client_io_;
  std::optional<asio::executor_work_guard<asio::io_context::executor_type>> work_;
  std::unique_ptr<TcpListener> listener_;
  std::thread thread_;
};

TEST_F(TcpFixture, BadAndOverlongLinesAreRefusedWithoutClosingTheConnection) {
  TcpListenerOptions options;
  options.max_line_bytes = 100;
  StartListener(options);
  tcp::socket socket = Connect();
  const std::string text = Lines("a", 0, 5) + "not,a,reading\n" + std::string(500, 'x') +
                           "\n" + Lines("a", 5, 5);
  asio::write(socket, asio::buffer(text));
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 10; }));
  EXPECT_EQ(pipeline_.observer()->Refused("bad_time"), 1u);
  EXPECT_EQ(pipeline_.observer()->Refused("line_too_long"), 1u);
  EXPECT_EQ(listener_->open_connections(), 1u);  // still open
  asio::write(socket, asio::buffer(Lines("a", 10, 5)));
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 15; }));
  EXPECT_EQ(pipeline_.Readings("a"), 15);
}

TEST_F(TcpFixture, HundredsOfConcurrentConnectionsAllGetThrough) {
  StartListener({});
  constexpr int kConnections = 300, kLinesEach = 20;
  std::vector<tcp::socket> sockets;
  for (int c = 0; c < kConnections; ++c) sockets.push_back(Connect());
  ASSERT_TRUE(WaitFor([&] { return listener_->open_connections() == kConnections; }));
  for (int c = 0; c < kConnections; ++c) {
    asio::write(sockets[c], asio::buffer(Lines("s" + std::to_string(c), 0, kLinesEach)));
  }
  for (auto& socket : sockets) socket.close();
  ASSERT_TRUE(
      WaitFor([&] { return pipeline_.Processed() == kConnections * kLinesEach; }));
  EXPECT_EQ(pipeline_.Readings("s0"), kLinesEach);
  EXPECT_EQ(pipeline_.Readings("s299"), kLinesEach);
  ASSERT_TRUE(WaitFor([&] { return listener_->open_connections() == 0; }));
}

TEST_F(TcpFixture, LastLineWithoutNewlineCountsAtEndOfStream) {
  StartListener({});
  tcp::socket socket = Connect();
  const std::string text = Lines("a", 0, 3);
  asio::write(socket, asio::buffer(text.substr(0, text.size() - 1)));
  socket.shutdown(tcp::socket::shutdown_send);
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 3; }));
}

TEST_F(TcpFixture, IdleConnectionIsClosed) {
  TcpListenerOptions options;
  options.idle_timeout = 50 * 1000;  // 50 ms
  StartListener(options);
  tcp::socket socket = Connect();
  asio::write(socket, asio::buffer(Lines("a", 0, 1)));
  // The server closes: our read ends with end of stream.
  char byte;
  boost::system::error_code error;
  asio::read(socket, asio::buffer(&byte, 1), error);
  EXPECT_EQ(error, asio::error::eof);
  ASSERT_TRUE(WaitFor([&] { return listener_->open_connections() == 0; }));
  EXPECT_TRUE(WaitFor([&] { return pipeline_.Processed() == 1; }));
}

TEST_F(TcpFixture, ConnectionsBeyondTheLimitAreClosedAtOnce) {
  TcpListenerOptions options;
  options.max_connections = 2;
  StartListener(options);
  tcp::socket a = Connect(), b = Connect();
  ASSERT_TRUE(WaitFor([&] { return listener_->open_connections() == 2; }));
  tcp::socket c = Connect();
  char byte;
  boost::system::error_code error;
  asio::read(c, asio::buffer(&byte, 1), error);
  EXPECT_TRUE(error == asio::error::eof || error == asio::error::connection_reset)
      << error.message();
  EXPECT_EQ(listener_->open_connections(), 2u);
  EXPECT_EQ(pipeline_.observer()->Dropped("tcp/too_many_connections"), 1u);
}

// Reads until the server closes the connection; true when it did.
bool ServerCloses(tcp::socket& socket) {
  char byte;
  boost::system::error_code error;
  asio::read(socket, asio::buffer(&byte, 1), error);
  return error == asio::error::eof || error == asio::error::connection_reset;
}

TEST_F(TcpFixture, IdleConnectionsAreCountedWhenClosed) {
  TcpListenerOptions options;
  options.idle_timeout = 50 * 1000;  // 50 ms
  StartListener(options);
  tcp::socket socket = Connect();
  EXPECT_TRUE(ServerCloses(socket));
  EXPECT_TRUE(WaitFor([&] { return pipeline_.observer()->Dropped("tcp/idle_timeout") == 1; }));
}

TEST_F(TcpFixture, ASlowSenderHoldingHalfALineDoesNotHoldUpAnotherConnection) {
  StartListener({});
  tcp::socket slow = Connect();
  const std::string line = Lines("slow", 0, 1);
  asio::write(slow, asio::buffer(line.substr(0, 10)));  // and then nothing for a while
  tcp::socket fast = Connect();
  asio::write(fast, asio::buffer(Lines("fast", 0, 50)));
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 50; }));
  asio::write(slow, asio::buffer(line.substr(10)));
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 51; }));
  EXPECT_EQ(pipeline_.Readings("slow"), 1);
  EXPECT_EQ(listener_->open_connections(), 2u);
}

TEST_F(TcpFixture, ReadingsFarAheadOfTheClockAreRefusedAndTheSeriesKeepsWorking) {
  StartListener(
      {}, TcpIngestRules{.max_time_ahead = kMicrosPerDay, .token = {}, .tls = nullptr});
  tcp::socket socket = Connect();
  // Lines() stamps 2026-03-01 onwards: in the past. Year 2100 is not.
  const std::string text =
      Lines("a", 0, 3) + "4102444800,a,1\n2100-01-01T00:00:00Z,b,1\n" + Lines("a", 3, 3);
  asio::write(socket, asio::buffer(text));
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 6; }));
  EXPECT_EQ(pipeline_.observer()->Refused("time_in_future"), 2u);
  EXPECT_EQ(pipeline_.Readings("a"), 6);
}

TEST_F(TcpFixture, WithATokenTheFirstLineMustPresentIt) {
  StartListener({}, TcpIngestRules{.token = "harbourside-7f3a", .tls = nullptr});
  tcp::socket good = Connect();
  // The token line may arrive in pieces, and readings may follow in the same read.
  asio::write(good, asio::buffer(std::string("tok")));
  asio::write(good, asio::buffer("en harbourside-7f3a\r\n" + Lines("a", 0, 4)));
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 4; }));

  tcp::socket wrong = Connect();
  asio::write(wrong, asio::buffer("token harbourside-7f3b\n" + Lines("b", 0, 4)));
  EXPECT_TRUE(ServerCloses(wrong));
  tcp::socket missing = Connect();
  asio::write(missing, asio::buffer(Lines("c", 0, 4)));
  EXPECT_TRUE(ServerCloses(missing));
  EXPECT_TRUE(WaitFor([&] { return pipeline_.observer()->Dropped("tcp/unauthorized") == 2; }));
  EXPECT_EQ(pipeline_.Readings("b"), 0);
  EXPECT_EQ(pipeline_.Readings("c"), 0);
  asio::write(good, asio::buffer(Lines("a", 4, 1)));  // the good one still works
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 5; }));
}

TEST_F(TcpFixture, AFullIngestBudgetPausesReadsUntilTheShardsCatchUp) {
  // Room for one batch at a time: every connection waits its turn.
  IngestBudget budget(1, pipeline_.observer());
  pipeline_.shards()->set_budget(&budget);
  StartListener({});
  tcp::socket socket = Connect();
  asio::write(socket, asio::buffer(Lines("a", 0, 5000)));
  ASSERT_TRUE(WaitFor([&] { return pipeline_.Processed() == 5000; }));
  EXPECT_EQ(pipeline_.Readings("a"), 5000);
  EXPECT_TRUE(WaitFor([&] { return budget.used() == 0; }));
  listener_->Stop();
  ASSERT_TRUE(WaitFor([&] { return listener_->open_connections() == 0; }));
  pipeline_.shards()->set_budget(nullptr);
}

TEST_F(TcpFixture, AddressInUseIsReportedNotThrown) {
  StartListener({});
  TcpListenerOptions options;
  options.port = listener_->local_endpoint().port();
  asio::io_context other;
  TcpListener second(other, options, pipeline_.shards(), nullptr);
  const Status status = second.Start();
  EXPECT_FALSE(status.ok());
  EXPECT_NE(status.message().find("cannot listen on 127.0.0.1:"), std::string::npos)
      << status.message();
}

}  // namespace
}  // namespace plumbline
