#include "models/attitude.h"

#include <cmath>

namespace fluxtrim::models {

double Dot(const Vec3& a, const Vec3& b) {
  return a.x * b.x + a.y * b.y + a.z * b.z;
}

Vec3 Cross(const Vec3& a, const Vec3& b) {
  return {a.y * b.z - a.z * b.y, a.z * b.x - a.x * b.z,
          a.x * b.y - a.y * b.x};
}

double Norm(const Vec3& a) { return std::sqrt(Dot(a, a)); }

Vec3 Multiply(const Mat3& m, const Vec3& v) {
  return {m.m[0][0] * v.x + m.m[0][1] * v.y + m.m[0][2] * v.z,
          m.m[1][0] * v.x + m.m[1][1] * v.y + m.m[1][2] * v.z,
          m.m[2][0] * v.x + m.m[2][1] * v.y + m.m[2][2] * v.z};
}

Vec3 MultiplyTransposed(const Mat3& m, const Vec3& v) {
  return {m.m[0][0] * v.x + m.m[1][0] * v.y + m.m[2][0] * v.z,
          m.m[0][1] * v.x + m.m[1][1] * v.y + m.m[2][1] * v.z,
          m.m[0][2] * v.x + m.m[1][2] * v.y + m.m[2][2] * v.z};
}

Mat3 NedToBody(const Attitude& a) {
  const double cf = std::cos(a.roll), sf = std::sin(a.roll);
  const double ct = std::cos(a.pitch), st = std::sin(a.pitch);
  const double cp = std::cos(a.heading), sp = std::sin(a.heading);
  // R1(roll) R2(pitch) R3(heading), multiplied out.
  Mat3 c;
  c.m[0][0] = ct * cp;
  c.m[0][1] = ct * sp;
  c.m[0][2] = -st;
  c.m[1][0] = sf * st * cp - cf * sp;
  c.m[1][1] = sf * st * sp + cf * cp;
  c.m[1][2] = sf * ct;
  c.m[2][0] = cf * st * cp + sf * sp;
  c.m[2][1] = cf * st * sp - sf * cp;
  c.m[2][2] = cf * ct;
  return c;
}

Vec3 BodyRate(const Attitude& a, const Attitude& r) {
  const double cf = std::cos(a.roll), sf = std::sin(a.roll);
  const double ct = std::cos(a.pitch), st = std::sin(a.pitch);
  return {r.roll - r.heading * st,
          r.pitch * cf + r.heading * sf * ct,
          -r.pitch * sf + r.heading * cf * ct};
}

}  // namespace fluxtrim::models
