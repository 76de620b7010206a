// FOM metrics on small hand-computed examples, plus one NumPy cross-check
// run live with /usr/bin/python3 (skipped when NumPy is missing).

#include "src/core/metrics.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdlib>
#include <sstream>
#include <stdexcept>
#include <string>
#include <vector>

#include "tests/support/subprocess.h"

namespace fluxtrim::core {
namespace {

const double kNaN = std::nan("");

TEST(PeakToPeak, SkipsGapsAndIsNaNWithoutData) {
  // By hand: max 3.5 - min -2 = 5.5.
  const std::vector<double> x = {1, kNaN, -2, 3.5};
  EXPECT_EQ(PeakToPeak(x), 5.5);
  EXPECT_EQ(PeakToPeak(x.data(), 3), 3.0);  // first three: 1 - (-2)
  EXPECT_TRUE(std::isnan(PeakToPeak(std::vector<double>{kNaN, kNaN})));
  EXPECT_TRUE(std::isnan(PeakToPeak(nullptr, 0)));
  EXPECT_EQ(PeakToPeak(std::vector<double>{7}), 0.0);
}

TEST(Rms, SkipsGaps) {
  // By hand: sqrt((9 + 16) / 2).
  EXPECT_DOUBLE_EQ(Rms(std::vector<double>{3, kNaN, -4}), std::sqrt(12.5));
  EXPECT_TRUE(std::isnan(Rms(std::vector<double>{})));
}

TEST(StandardDeviation, IsThePopulationDeviationAndSkipsGaps) {
  // Textbook example {2,4,4,4,5,5,7,9}: mean 5, squared deviations sum to
  // 32, population standard deviation sqrt(32 / 8) = 2 (by hand).
  EXPECT_DOUBLE_EQ(
      StandardDeviation(std::vector<double>{2, 4, kNaN, 4, 4, 5, 5, 7, 9}),
      2.0);
  EXPECT_TRUE(std::isnan(StandardDeviation(std::vector<double>{kNaN})));
}

TEST(StandardDeviation, KeepsItsDigitsOnATotalFieldLevel) {
  // 52000 nT + {0.1, 0.2, 0.3}: deviation 0.1 sqrt(2/3) (by hand). A
  // one-pass sum of squares would lose ~1e-7 nT here (2.7e9 squared level,
  // 16 digits); the two-pass form keeps 52000 * 1e-16 ~ 1e-11 nT.
  constexpr double kTolNt = 1e-10;
  const std::vector<double> x = {52000.1, 52000.2, 52000.3};
  EXPECT_NEAR(StandardDeviation(x), 0.1 * std::sqrt(2.0 / 3.0), kTolNt);
}

TEST(ManeuverPeakToPeak, UsesSamplesInsideEachManeuverInclusive) {
  std::vector<double> time, before, after;
  for (int i = 0; i < 10; ++i) {
    time.push_back(i);
    before.push_back(i);     // pp over [2, 5] = 3
    after.push_back(i % 2);  // pp over [2, 5] = 1
  }
  after[3] = kNaN;  // a gap in the compensated field only
  Maneuver pitch;
  pitch.start_s = 2;
  pitch.end_s = 5;
  Maneuver empty;
  empty.kind = ManeuverKind::kYaw;
  empty.start_s = 20;
  empty.end_s = 30;
  const std::vector<ManeuverMetric> m =
      ManeuverPeakToPeak(time, before, after, {pitch, empty});
  ASSERT_EQ(m.size(), 2u);
  EXPECT_EQ(m[0].samples, 4u);
  EXPECT_EQ(m[0].pp_before_nT, 3.0);
  EXPECT_EQ(m[0].pp_after_nT, 1.0);
  EXPECT_EQ(m[1].samples, 0u);
  EXPECT_TRUE(std::isnan(m[1].pp_before_nT));
  EXPECT_TRUE(std::isnan(m[1].pp_after_nT));
  EXPECT_EQ(m[1].maneuver.kind, ManeuverKind::kYaw);
  EXPECT_THROW(ManeuverPeakToPeak(time, before, {1.0}, {pitch}),
               std::invalid_argument);
}

TEST(Fom, SumsPeakToPeakAndSkipsManeuversWithoutData) {
  std::vector<ManeuverMetric> m(3);
  m[0].pp_before_nT = 10;
  m[0].pp_after_nT = 1;
  m[1].pp_before_nT = 20;
  m[1].pp_after_nT = 2.5;
  m[2].pp_before_nT = kNaN;
  m[2].pp_after_nT = kNaN;
  EXPECT_EQ(Fom(m, /*after=*/true), 3.5);    // 1 + 2.5, by hand
  EXPECT_EQ(Fom(m, /*after=*/false), 30.0);  // 10 + 20
  EXPECT_TRUE(std::isnan(Fom({}, true)));
}

TEST(ImprovementRatio, IsRatioOfDeviationsOverCommonSamples) {
  std::vector<double> before, after;
  for (int i = 0; i < 100; ++i) {
    after.push_back(std::sin(0.37 * i));
    before.push_back(3 * after.back() + 7);  // offset does not matter
  }
  before[10] = kNaN;  // skipped on both sides
  after[20] = kNaN;
  // sd(3 a + 7) = 3 sd(a) on the same samples (by hand).
  constexpr double kTol = 1e-12;
  EXPECT_NEAR(ImprovementRatio(before, after), 3.0, kTol);
  EXPECT_TRUE(std::isnan(
      ImprovementRatio(std::vector<double>{1, 2}, std::vector<double>{5, 5})));
  EXPECT_THROW(ImprovementRatio({1, 2}, {1}), std::invalid_argument);
}

TEST(Metrics, AgreeWithNumPyOnASyntheticField) {
  const std::string probe =
      std::string(FLUXTRIM_PYTHON) + " -c 'import numpy' >/dev/null 2>&1";
  if (std::system(probe.c_str()) != 0) GTEST_SKIP() << "no numpy";
  // x_i = 52000 + 30 sin(0.01 i) + 0.5 cos(1.3 i), i = 0..9999, in both.
  std::vector<double> x(10000);
  for (std::size_t i = 0; i < x.size(); ++i) {
    x[i] = 52000 + 30 * std::sin(0.01 * i) + 0.5 * std::cos(1.3 * i);
  }
  const std::string cmd =
      std::string(FLUXTRIM_PYTHON) +
      " -c 'import numpy as n; i = n.arange(10000); "
      "x = 52000 + 30 * n.sin(0.01 * i) + 0.5 * n.cos(1.3 * i); "
      "print(repr(float(n.ptp(x))), repr(float(n.std(x))), "
      "repr(float(n.sqrt(n.mean((x - 52000) ** 2)))))'";
  const test_support::CommandResult run = test_support::RunCommand(cmd);
  ASSERT_NE(run.code, -1) << cmd;
  std::string line;
  std::istringstream lines(run.output);
  ASSERT_TRUE(std::getline(lines, line)) << cmd;
  std::istringstream in(line);
  double ptp = 0, sd = 0, rms = 0;
  in >> ptp >> sd >> rms;
  // numpy.std sums pairwise, we sum in order: both are within ~1e-16 x
  // 10000 relative of the true value; sin/cos of libm and NumPy may differ
  // by an ulp. 1e-9 nT on a 52000 nT level allows for both.
  constexpr double kTolNt = 1e-9;
  EXPECT_NEAR(PeakToPeak(x), ptp, kTolNt);
  EXPECT_NEAR(StandardDeviation(x), sd, kTolNt);
  std::vector<double> shifted(x);
  for (double& v : shifted) v -= 52000;
  EXPECT_NEAR(Rms(shifted), rms, kTolNt);
}

}  // namespace
}  // namespace fluxtrim::core
