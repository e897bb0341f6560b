#include "detectors/calibration_memo.h"

#include <gtest/gtest.h>

#include <atomic>
#include <cmath>
#include <thread>
#include <vector>

#include "detectors/arrival_model.h"
#include "detectors/variance_cusum.h"

namespace plumbline {
namespace {

TEST(CalibrationMemoTest, ComputesEachKeyOnceAndForgetsFailures) {
  CalibrationMemo<double> memo;
  int calls = 0;
  auto twice = [&calls](double x) {
    return [&calls, x]() -> StatusOr<double> {
      ++calls;
      return 2.0 * x;
    };
  };
  EXPECT_EQ(*memo.Get(3.0, twice(3.0)), 6.0);
  EXPECT_EQ(*memo.Get(3.0, twice(3.0)), 6.0);
  EXPECT_EQ(calls, 1);
  EXPECT_EQ(*memo.Get(4.0, twice(4.0)), 8.0);
  EXPECT_EQ(calls, 2);
  auto failing = [&calls]() -> StatusOr<double> {
    ++calls;
    return Status::InvalidArgument("no");
  };
  EXPECT_FALSE(memo.Get(5.0, failing).ok());
  EXPECT_FALSE(memo.Get(5.0, failing).ok());
  EXPECT_EQ(calls, 4);  // a failure is computed again
  // A NaN key is never stored: it would match any key in an ordered map.
  EXPECT_EQ(*memo.Get(std::nan(""), twice(10.0)), 20.0);
  EXPECT_EQ(*memo.Get(3.0, twice(1.0)), 6.0);
  EXPECT_EQ(*memo.Get(std::nan(""), twice(11.0)), 22.0);
  EXPECT_EQ(calls, 6);
}

TEST(CalibrationMemoTest, ThreadsAskingTogetherAllGetTheValue) {
  CalibrationMemo<double> memo;
  std::atomic<int> calls{0};
  std::vector<std::thread> threads;
  std::vector<double> got(8, 0.0);
  for (int i = 0; i < 8; ++i) {
    threads.emplace_back([&, i] {
      got[i] = *memo.Get(1.5, [&calls]() -> StatusOr<double> {
        ++calls;
        return 7.0;
      });
    });
  }
  for (auto& t : threads) t.join();
  for (double g : got) EXPECT_EQ(g, 7.0);
  EXPECT_GE(calls.load(), 1);
  EXPECT_EQ(*memo.Get(1.5, []() -> StatusOr<double> { return 0.0; }), 7.0);
}

// The remembered calibrations equal a fresh search: same intervals as the
// chain gives for the same CDFs, bit for bit on a second call.
TEST(CalibrationMemoTest, RememberedDesignsEqualTheirFirstComputation) {
  const auto first = VarianceCusumOptions::Calibrated(1234.0);
  const auto second = VarianceCusumOptions::Calibrated(1234.0);
  ASSERT_TRUE(first.ok() && second.ok());
  EXPECT_EQ(first->up_h, second->up_h);
  EXPECT_EQ(first->down_h, second->down_h);
  const auto a = ArrivalModelOptions::Calibrated(1234.0);
  const auto b = ArrivalModelOptions::Calibrated(1234.0);
  ASSERT_TRUE(a.ok() && b.ok());
  EXPECT_EQ(a->slower_h, b->slower_h);
  EXPECT_EQ(a->faster_h, b->faster_h);
  // A different arl0 is not mixed up with it.
  const auto wider = VarianceCusumOptions::Calibrated(12340.0);
  ASSERT_TRUE(wider.ok());
  EXPECT_GT(wider->up_h, first->up_h);
}

}  // namespace
}  // namespace plumbline
