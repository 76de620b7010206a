#pragma once
// Attitude of a platform and the small vector algebra the simulator needs.
//
// Frames: the local-level frame is geodetic north/east/down (NED); the body
// frame is x forward, y starboard, z down. Attitude is the 3-2-1 (yaw,
// pitch, roll) Euler sequence: rotate the NED frame by heading psi about
// down, then by pitch theta about the new y, then by roll phi about the new
// x. Heading is from TRUE north (the WMM gives geodetic N/E/D components,
// so no declination is added anywhere). Positive roll lowers the starboard
// wing, positive pitch raises the nose, positive heading turns clockwise
// seen from above. Angles in radians.
//
// The direction-cosine matrix taking NED components to body components is
//   C_bn = R1(phi) R2(theta) R3(psi),
//   R3(psi) = [ c s 0; -s c 0; 0 0 1]  (and likewise R1, R2),
// (Stevens & Lewis, "Aircraft Control and Simulation", 2nd ed., eq. 1.3-20;
// Titterton & Weston, "Strapdown Inertial Navigation Technology", 2nd ed.,
// sec. 3.6.3; both from memory). Example: heading 90 deg (east), level: a
// field pointing north appears on the -y (port) body axis.
//
// Body angular rate (rad/s, body axes, rate of the body frame relative to
// NED) from the Euler angle rates (same sources, eq. 1.4-4):
//   p = phi' - psi' sin(theta)
//   q = theta' cos(phi) + psi' sin(phi) cos(theta)
//   r = -theta' sin(phi) + psi' cos(phi) cos(theta)
// and d(C_bn)/dt = -[w x] C_bn, so a vector fixed in NED is seen in the
// body to change as  d(b)/dt = -w x b.

#include "models/fluxgate_sensor.h"  // Vec3

namespace fluxtrim::models {

struct Attitude {
  double roll = 0.0;     // rad
  double pitch = 0.0;    // rad
  double heading = 0.0;  // rad from true north, clockwise
};

// Row-major 3x3 matrix: m[row][col].
struct Mat3 {
  double m[3][3] = {{0, 0, 0}, {0, 0, 0}, {0, 0, 0}};
};

inline Vec3 operator+(const Vec3& a, const Vec3& b) {
  return {a.x + b.x, a.y + b.y, a.z + b.z};
}
inline Vec3 operator-(const Vec3& a, const Vec3& b) {
  return {a.x - b.x, a.y - b.y, a.z - b.z};
}
inline Vec3 operator*(double s, const Vec3& a) {
  return {s * a.x, s * a.y, s * a.z};
}
double Dot(const Vec3& a, const Vec3& b);
Vec3 Cross(const Vec3& a, const Vec3& b);
double Norm(const Vec3& a);
// m * v and m^T * v.
Vec3 Multiply(const Mat3& m, const Vec3& v);
Vec3 MultiplyTransposed(const Mat3& m, const Vec3& v);

// C_bn: NED components -> body components.
Mat3 NedToBody(const Attitude& attitude);

// Body angular rate w (rad/s, body axes) from attitude and Euler angle
// rates (rad/s).
Vec3 BodyRate(const Attitude& attitude, const Attitude& euler_rates);

}  // namespace fluxtrim::models
