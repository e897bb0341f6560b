#include "detectors/severity.h"

#include <gtest/gtest.h>

namespace plumbline {
namespace {

std::uint32_t Bits(std::initializer_list<DetectorKind> kinds) {
  std::uint32_t mask = 0;
  for (DetectorKind kind : kinds) mask |= 1u << static_cast<int>(kind);
  return mask;
}

SeriesEvent Level(std::uint32_t detectors, double magnitude_sd) {
  SeriesEvent e;
  e.kind = AlertKind::kLevel;
  e.detectors = detectors;
  e.magnitude_sd = magnitude_sd;
  return e;
}

TEST(SeverityTest, NamesReadBackAndOrderFromLeastToMostUrgent) {
  for (Severity s : {Severity::kRecord, Severity::kNotify, Severity::kPage}) {
    EXPECT_EQ(SeverityFromString(ToString(s)), s);
  }
  EXPECT_FALSE(SeverityFromString("critical").has_value());
  EXPECT_LT(Severity::kRecord, Severity::kNotify);
  EXPECT_LT(Severity::kNotify, Severity::kPage);
}

TEST(SeverityTest, AgreeingDetectorsAndALargeShiftPage) {
  const std::uint32_t two = Bits({DetectorKind::kCusum, DetectorKind::kBocpd});
  const std::uint32_t one = Bits({DetectorKind::kCusum});
  EXPECT_EQ(SeverityOf(Level(two, kPageAgreed)), Severity::kPage);
  EXPECT_EQ(SeverityOf(Level(two, -kPageAgreed)), Severity::kPage);  // either way
  EXPECT_EQ(SeverityOf(Level(two, 0.9 * kPageAgreed)), Severity::kNotify);
  // One detector alone needs a much larger shift.
  EXPECT_EQ(SeverityOf(Level(one, kPageAgreed)), Severity::kNotify);
  EXPECT_EQ(SeverityOf(Level(one, 0.99 * kPageAlone)), Severity::kNotify);
  EXPECT_EQ(SeverityOf(Level(one, -kPageAlone)), Severity::kPage);
}

TEST(SeverityTest, AnExplainedAlertIsOnlyRecordedHoweverLarge) {
  SeriesEvent e = Level(
      Bits({DetectorKind::kCusum, DetectorKind::kPageHinkley, DetectorKind::kBocpd}),
      20.0);
  ASSERT_EQ(SeverityOf(e), Severity::kPage);
  e.annotation = "defrost-schedule";
  EXPECT_EQ(SeverityOf(e), Severity::kRecord);
}

TEST(SeverityTest, KindsOtherThanLevelFollowTheDocumentedRule) {
  SeriesEvent e;
  e.kind = AlertKind::kSilence;
  EXPECT_EQ(SeverityOf(e), Severity::kPage);
  e.kind = AlertKind::kRate;
  EXPECT_EQ(SeverityOf(e), Severity::kNotify);
  e.kind = AlertKind::kVariance;
  e.magnitude = 1.5;  // sd ratio
  EXPECT_EQ(SeverityOf(e), Severity::kNotify);
  e.magnitude = kPageSpreadRatio;
  EXPECT_EQ(SeverityOf(e), Severity::kPage);
  e.magnitude = 0.4;  // narrower
  EXPECT_EQ(SeverityOf(e), Severity::kNotify);
}

TEST(SeverityTest, EventsThatAreNotAlertsAreRecorded) {
  for (EventType type : {EventType::kResume, EventType::kRetrain, EventType::kMeterReset,
                         EventType::kSuppressed}) {
    SeriesEvent e = Level(Bits({DetectorKind::kCusum, DetectorKind::kBocpd}), 10.0);
    e.type = type;
    EXPECT_EQ(SeverityOf(e), Severity::kRecord) << ToString(type);
  }
}

}  // namespace
}  // namespace plumbline
