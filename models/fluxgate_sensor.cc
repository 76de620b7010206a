#include "models/fluxgate_sensor.h"

#include <cmath>

namespace fluxtrim::models {
namespace {

// R = Rx(ax) Ry(ay) Rz(az), passive-free form: a plain product of
// elementary rotation matrices acting on column vectors.
void Rotation(const double a[3], double r[3][3]) {
  const double cx = std::cos(a[0]), sx = std::sin(a[0]);
  const double cy = std::cos(a[1]), sy = std::sin(a[1]);
  const double cz = std::cos(a[2]), sz = std::sin(a[2]);
  const double rx[3][3] = {{1, 0, 0}, {0, cx, -sx}, {0, sx, cx}};
  const double ry[3][3] = {{cy, 0, sy}, {0, 1, 0}, {-sy, 0, cy}};
  const double rz[3][3] = {{cz, -sz, 0}, {sz, cz, 0}, {0, 0, 1}};
  double t[3][3];
  for (int i = 0; i < 3; ++i) {
    for (int j = 0; j < 3; ++j) {
      t[i][j] = 0;
      for (int k = 0; k < 3; ++k) t[i][j] += ry[i][k] * rz[k][j];
    }
  }
  for (int i = 0; i < 3; ++i) {
    for (int j = 0; j < 3; ++j) {
      r[i][j] = 0;
      for (int k = 0; k < 3; ++k) r[i][j] += rx[i][k] * t[k][j];
    }
  }
}

void Gains(const SensorCalibration& cal, double temp_c, double s[3],
           double o[3]) {
  const double dt = temp_c - cal.reference_temp_c;
  for (int i = 0; i < 3; ++i) {
    s[i] = cal.gains[i] * (1.0 + cal.gain_tc_per_K[i] * dt);
    o[i] = cal.offsets_nT[i] + cal.offset_tc_nT_per_K[i] * dt;
  }
}

}  // namespace

Vec3 SensorRaw(const SensorCalibration& cal, const Vec3& b_body,
               double temp_c) {
  double r[3][3];
  Rotation(cal.misalignment_rad, r);
  const double b[3] = {b_body.x, b_body.y, b_body.z};
  double v[3];
  for (int i = 0; i < 3; ++i) {
    v[i] = r[i][0] * b[0] + r[i][1] * b[1] + r[i][2] * b[2];
  }
  const double u1 = cal.nonorthogonality_rad[0];
  const double u2 = cal.nonorthogonality_rad[1];
  const double u3 = cal.nonorthogonality_rad[2];
  const double p[3] = {
      v[0],
      std::sin(u1) * v[0] + std::cos(u1) * v[1],
      std::sin(u2) * v[0] + std::sin(u3) * std::cos(u2) * v[1] +
          std::cos(u2) * std::cos(u3) * v[2]};
  double s[3], o[3];
  Gains(cal, temp_c, s, o);
  return {s[0] * p[0] + o[0], s[1] * p[1] + o[1], s[2] * p[2] + o[2]};
}

SensorCorrector::SensorCorrector(const SensorCalibration& cal)
    : cal_(cal),
      sin_u1_(std::sin(cal.nonorthogonality_rad[0])),
      cos_u1_(std::cos(cal.nonorthogonality_rad[0])),
      sin_u2_(std::sin(cal.nonorthogonality_rad[1])),
      cos_u2_(std::cos(cal.nonorthogonality_rad[1])),
      sin_u3_(std::sin(cal.nonorthogonality_rad[2])),
      cos_u3_(std::cos(cal.nonorthogonality_rad[2])) {
  Rotation(cal.misalignment_rad, r_);
}

Vec3 SensorCorrector::operator()(const Vec3& raw, double temp_c) const {
  double s[3], o[3];
  Gains(cal_, temp_c, s, o);
  const double p[3] = {(raw.x - o[0]) / s[0], (raw.y - o[1]) / s[1],
                       (raw.z - o[2]) / s[2]};
  // Forward substitution through the lower-triangular P.
  double v[3];
  v[0] = p[0];
  v[1] = (p[1] - sin_u1_ * v[0]) / cos_u1_;
  v[2] = (p[2] - sin_u2_ * v[0] - sin_u3_ * cos_u2_ * v[1]) /
         (cos_u2_ * cos_u3_);
  // R is orthogonal: its inverse is its transpose.
  return {r_[0][0] * v[0] + r_[1][0] * v[1] + r_[2][0] * v[2],
          r_[0][1] * v[0] + r_[1][1] * v[1] + r_[2][1] * v[2],
          r_[0][2] * v[0] + r_[1][2] * v[1] + r_[2][2] * v[2]};
}

Vec3 SensorCorrect(const SensorCalibration& cal, const Vec3& raw,
                   double temp_c) {
  return SensorCorrector(cal)(raw, temp_c);
}

}  // namespace fluxtrim::models
