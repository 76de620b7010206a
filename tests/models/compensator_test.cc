#include "models/compensator.h"

#include <cmath>
#include <random>
#include <vector>

#include <gtest/gtest.h>

namespace fluxtrim::models {
namespace {

constexpr double kPi = 3.14159265358979323846;

CompensatorModel SmallModel(double lag_s) {
  CompensatorModel m;
  m.engine.sample_rate_hz = 10.0;
  m.engine.half_width = 2;
  m.coefficients.assign(TermCount(m.engine.terms), 0.0);
  m.coefficients[0] = 3.0;    // perm_x, nT
  m.coefficients[4] = 1e-4;   // ind_xy
  m.coefficients[9] = 2e-5;   // eddy_xy, s
  m.lag_s = lag_s;
  m.interference_mean_nT = 1.5;
  return m;
}

struct Outputs {
  std::vector<CompensatedSample> out;
};

// Pushes n samples of a slowly rotating field; f is a known function of time.
Outputs Push(Compensator& c, int n, double t0, double (*f_of_t)(double),
         int gap_at = -1) {
  Outputs run;
  std::vector<CompensatedSample> buf(static_cast<std::size_t>(c.max_outputs()));
  for (int i = 0; i < n; ++i) {
    double t = t0 + 0.1 * i;
    if (gap_at >= 0 && i >= gap_at) t += 5.0;
    const double a = 0.3 * std::sin(2 * kPi * 0.2 * t);
    const double b[3] = {20000 * std::cos(a), 20000 * std::sin(a), 45000};
    const int k = c.Push(t, b, f_of_t(t), nullptr, NAN, NAN, 20.0, buf.data());
    run.out.insert(run.out.end(), buf.begin(), buf.begin() + k);
  }
  const int k = c.Flush(buf.data());
  run.out.insert(run.out.end(), buf.begin(), buf.begin() + k);
  return run;
}

double Linear(double t) { return 50000.0 + 2.0 * t; }

TEST(CompensatorTest, EmitsEverySampleOnceInOrder) {
  for (double lag : {0.0, 0.13, -0.27, 0.4}) {
    Compensator c(SmallModel(lag));
    const Outputs run = Push(c, 200, 0.0, Linear, 120);
    ASSERT_EQ(run.out.size(), 200u) << "lag " << lag;
    for (std::size_t i = 0; i < run.out.size(); ++i) {
      EXPECT_EQ(run.out[i].index, i);
    }
  }
}

TEST(CompensatorTest, LagShiftsTheScalarReadingExactlyForALinearSignal) {
  // Catmull-Rom reproduces straight lines exactly, so away from the segment
  // ends f(t + lag) of a linear f is known in closed form.
  const double lag = 0.13;
  Compensator c(SmallModel(lag));
  const Outputs run = Push(c, 100, 0.0, Linear);
  for (const CompensatedSample& s : run.out) {
    if (s.flags & kFlagLagEdge) continue;
    const double f_lagged = Linear(s.time + lag);
    // 1e-9 nT: values near 5e4 nT carry ~1e-11 nT rounding.
    EXPECT_NEAR(s.f_comp + s.f_interference, f_lagged, 1e-9);
  }
}

TEST(CompensatorTest, InterferenceHasTheModelMeanRemoved) {
  Compensator c(SmallModel(0.0));
  const Outputs run = Push(c, 60, 0.0, Linear);
  for (const CompensatedSample& s : run.out) {
    EXPECT_DOUBLE_EQ(s.f_comp, Linear(s.time) - s.f_interference);
  }
}

TEST(CompensatorTest, IsDeterministicAndFlagsBothSidesOfAGap) {
  // Same input twice through fresh engines: identical outputs (no hidden
  // state across runs), and the flags of the gap are present.
  Compensator a(SmallModel(0.2)), b(SmallModel(0.2));
  const Outputs ra = Push(a, 150, 0.0, Linear, 70);
  const Outputs rb = Push(b, 150, 0.0, Linear, 70);
  ASSERT_EQ(ra.out.size(), rb.out.size());
  bool saw_gap_edge = false;
  for (std::size_t i = 0; i < ra.out.size(); ++i) {
    EXPECT_EQ(ra.out[i].f_comp, rb.out[i].f_comp);
    saw_gap_edge |= (ra.out[i].flags & kFlagGapEdge) != 0;
  }
  EXPECT_TRUE(saw_gap_edge);
  EXPECT_TRUE(ra.out[69].flags & kFlagGapEdge);
  EXPECT_TRUE(ra.out[70].flags & kFlagGapEdge);
}

TEST(CompensatorTest, RejectsAModelWithTheWrongCoefficientCount) {
  CompensatorModel m = SmallModel(0.0);
  m.coefficients.pop_back();
  EXPECT_THROW(Compensator{m}, std::invalid_argument);
}

TEST(CompensatorTest, FluxgateOnlyCompensatesTheFluxgateMagnitude) {
  CompensatorModel m = SmallModel(0.0);
  m.scalar_sensor = false;
  Compensator c(m);
  const Outputs run = Push(c, 40, 0.0, Linear);
  for (const CompensatedSample& s : run.out) {
    EXPECT_NEAR(s.f_comp + s.f_interference, s.bt, 1e-9);
  }
}

}  // namespace
}  // namespace fluxtrim::models
