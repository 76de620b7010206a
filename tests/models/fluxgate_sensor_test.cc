// Tests of the fluxgate forward model E = S P R B + o and its inverse
// (models/fluxgate_sensor.h). The reference for every matrix is built here
// independently with Eigen (AngleAxis rotations, an explicit P), following
// the form of Merayo et al. 2000 as recalled from memory.

#include "models/fluxgate_sensor.h"

#include <cmath>
#include <random>

#include <Eigen/Dense>
#include <Eigen/Geometry>
#include <gtest/gtest.h>

namespace fluxtrim::models {
namespace {

constexpr double kDeg = 3.14159265358979323846 / 180.0;
// Fields are ~5e4 nT; a handful of double operations lose a few ulps of
// that: 1e-9 nT is ~1e-14 relative, far below any physical effect.
constexpr double kTolNT = 1e-9;

Eigen::Vector3d V(const Vec3& v) { return {v.x, v.y, v.z}; }

SensorCalibration Sample() {
  SensorCalibration c;
  c.gains[0] = 1.013;
  c.gains[1] = 0.992;
  c.gains[2] = 1.004;
  c.offsets_nT[0] = 41.0;
  c.offsets_nT[1] = -18.5;
  c.offsets_nT[2] = 7.25;
  c.nonorthogonality_rad[0] = 0.3 * kDeg;
  c.nonorthogonality_rad[1] = -0.45 * kDeg;
  c.nonorthogonality_rad[2] = 0.2 * kDeg;
  c.misalignment_rad[0] = 1.1 * kDeg;
  c.misalignment_rad[1] = -0.6 * kDeg;
  c.misalignment_rad[2] = 2.0 * kDeg;
  return c;
}

// E = S P R B + o written out with Eigen.
Eigen::Vector3d Reference(const SensorCalibration& c, const Eigen::Vector3d& b,
                          double temp_c) {
  const double u1 = c.nonorthogonality_rad[0];
  const double u2 = c.nonorthogonality_rad[1];
  const double u3 = c.nonorthogonality_rad[2];
  Eigen::Matrix3d p;
  p << 1, 0, 0, std::sin(u1), std::cos(u1), 0, std::sin(u2),
      std::sin(u3) * std::cos(u2), std::cos(u2) * std::cos(u3);
  const Eigen::Matrix3d r =
      (Eigen::AngleAxisd(c.misalignment_rad[0], Eigen::Vector3d::UnitX()) *
       Eigen::AngleAxisd(c.misalignment_rad[1], Eigen::Vector3d::UnitY()) *
       Eigen::AngleAxisd(c.misalignment_rad[2], Eigen::Vector3d::UnitZ()))
          .toRotationMatrix();
  const double dt = temp_c - c.reference_temp_c;
  Eigen::Vector3d s, o;
  for (int k = 0; k < 3; ++k) {
    s(k) = c.gains[k] * (1 + c.gain_tc_per_K[k] * dt);
    o(k) = c.offsets_nT[k] + c.offset_tc_nT_per_K[k] * dt;
  }
  return s.asDiagonal() * (p * (r * b)) + o;
}

TEST(FluxgateSensor, IdentityCalibrationReturnsTheField) {
  const SensorCalibration c;
  const Vec3 b{21000.0, -3500.0, 43000.0};
  const Vec3 e = SensorRaw(c, b);
  EXPECT_EQ(e.x, b.x);
  EXPECT_EQ(e.y, b.y);
  EXPECT_EQ(e.z, b.z);
}

TEST(FluxgateSensor, ForwardModelMatchesTheMatrixProduct) {
  std::mt19937 rng(1);
  std::normal_distribution<double> g(0.0, 30000.0);
  const SensorCalibration c = Sample();
  for (int i = 0; i < 100; ++i) {
    const Eigen::Vector3d b(g(rng), g(rng), g(rng));
    const Eigen::Vector3d want = Reference(c, b, 20.0);
    const Eigen::Vector3d got = V(SensorRaw(c, {b.x(), b.y(), b.z()}));
    EXPECT_LT((got - want).norm(), kTolNT) << "sample " << i;
  }
}

TEST(FluxgateSensor, CorrectionInvertsTheForwardModel) {
  std::mt19937 rng(2);
  std::normal_distribution<double> g(0.0, 30000.0);
  std::uniform_real_distribution<double> temp(-20.0, 50.0);
  SensorCalibration c = Sample();
  c.gain_tc_per_K[0] = 2e-5;
  c.gain_tc_per_K[2] = -1e-5;
  c.offset_tc_nT_per_K[1] = 0.7;
  for (int i = 0; i < 100; ++i) {
    const Vec3 b{g(rng), g(rng), g(rng)};
    const double t = temp(rng);
    const Vec3 back = SensorCorrect(c, SensorRaw(c, b, t), t);
    EXPECT_LT((V(back) - V(b)).norm(), kTolNT) << "sample " << i;
    EXPECT_LT((V(SensorRaw(c, b, t)) - Reference(c, V(b), t)).norm(), kTolNT);
  }
}

TEST(FluxgateSensor, FirstSensorAxisIsTheReferenceXAxis) {
  // P's first row is [1, 0, 0]: with R = I the x reading sees only B_x.
  SensorCalibration c = Sample();
  c.misalignment_rad[0] = c.misalignment_rad[1] = c.misalignment_rad[2] = 0;
  const Vec3 e1 = SensorRaw(c, {0.0, 50000.0, 0.0});
  const Vec3 e2 = SensorRaw(c, {0.0, 0.0, 50000.0});
  EXPECT_DOUBLE_EQ(e1.x, c.offsets_nT[0]);
  EXPECT_DOUBLE_EQ(e2.x, c.offsets_nT[0]);
  // The y axis is tilted by u1 towards x: E_y(B = x-hat) = s_y sin u1.
  const Vec3 e3 = SensorRaw(c, {1000.0, 0.0, 0.0});
  EXPECT_NEAR(e3.y - c.offsets_nT[1],
              1000.0 * c.gains[1] * std::sin(c.nonorthogonality_rad[0]),
              kTolNT);
}

TEST(FluxgateSensor, MisalignmentKeepsTheMagnitudeOfACleanSensor) {
  // A pure rotation (unit gains, no offsets or non-orthogonality) keeps
  // |B|: the reason a magnitude fit cannot see R (Merayo et al. 2000).
  SensorCalibration c;
  c.misalignment_rad[0] = 4 * kDeg;
  c.misalignment_rad[1] = -9 * kDeg;
  c.misalignment_rad[2] = 30 * kDeg;
  const Vec3 b{12000.0, -25000.0, 41000.0};
  EXPECT_NEAR(V(SensorRaw(c, b)).norm(), V(b).norm(), kTolNT);
  EXPECT_GT((V(SensorRaw(c, b)) - V(b)).norm(), 1000.0);
}

TEST(FluxgateSensor, TemperatureIsIgnoredAtTheReferenceTemperature) {
  SensorCalibration c = Sample();
  c.gain_tc_per_K[1] = 5e-5;
  c.offset_tc_nT_per_K[2] = 1.0;
  const Vec3 b{1000.0, 2000.0, 45000.0};
  const Vec3 at_ref = SensorRaw(c, b, c.reference_temp_c);
  SensorCalibration no_tc = c;
  no_tc.gain_tc_per_K[1] = 0;
  no_tc.offset_tc_nT_per_K[2] = 0;
  EXPECT_LT((V(at_ref) - V(SensorRaw(no_tc, b))).norm(), kTolNT);
  // 10 K warmer: z offset +10 nT, y gain +0.05 %.
  const Vec3 warm = SensorRaw(c, b, c.reference_temp_c + 10.0);
  EXPECT_NEAR(warm.z - at_ref.z, 10.0, 1e-6);
  EXPECT_NEAR((warm.y - c.offsets_nT[1]) / (at_ref.y - c.offsets_nT[1]),
              1.0005, 1e-12);
}

}  // namespace
}  // namespace fluxtrim::models
