#pragma once
// Three-axis fluxgate sensor model, the form of Merayo et al. 2000
// ("Scalar calibration of vector magnetometers", Meas. Sci. Technol. 11:120),
// as recalled from memory:
//
//   E = S P R B + o
//
//   B  true field in the body frame (x forward, y starboard, z down), nT
//   R  misalignment: rotation from body axes to the sensor's reference axes,
//      three small angles (about x, y, z; applied z, then y, then x, i.e.
//      R = Rx(a_x) Ry(a_y) Rz(a_z) acting on column vectors)
//   P  non-orthogonality, lower triangular with rows
//        [1, 0, 0]
//        [sin u1, cos u1, 0]
//        [sin u2, sin u3 cos u2, cos u2 cos u3]
//   S  diag(gains) (dimensionless, 1 = perfect)
//   o  offsets, nT
//   E  raw reading, nT
//
// With a temperature channel T (deg C), gains and offsets vary linearly:
//   s_i(T) = s_i (1 + gain_tc_i (T - reference_temp_c))   [gain_tc in 1/K]
//   o_i(T) = o_i + offset_tc_i (T - reference_temp_c)      [offset_tc in nT/K]
//
// Hard iron of the platform (body-fixed field) is indistinguishable from the
// offsets and soft iron (a field-proportional matrix) from S P, so both fold
// into the same form. A magnitude-only fit never determines R.

namespace fluxtrim::models {

struct Vec3 {
  double x = 0, y = 0, z = 0;
};

struct SensorCalibration {
  double gains[3] = {1.0, 1.0, 1.0};
  double offsets_nT[3] = {0.0, 0.0, 0.0};
  double nonorthogonality_rad[3] = {0.0, 0.0, 0.0};  // u1, u2, u3
  double misalignment_rad[3] = {0.0, 0.0, 0.0};      // a_x, a_y, a_z
  double gain_tc_per_K[3] = {0.0, 0.0, 0.0};
  double offset_tc_nT_per_K[3] = {0.0, 0.0, 0.0};
  double reference_temp_c = 20.0;
};

// Forward model: raw reading E of true body-frame field B at temperature
// temp_c (ignored when every temperature coefficient is zero).
Vec3 SensorRaw(const SensorCalibration& cal, const Vec3& b_body,
               double temp_c = 20.0);

// Inverse: B = R^T P^-1 S^-1 (E - o). Exact inverse of SensorRaw.
Vec3 SensorCorrect(const SensorCalibration& cal, const Vec3& raw,
                   double temp_c = 20.0);

// SensorCorrect with its trigonometry done once, for per-sample paths
// (Compensator): the same arithmetic, so the same bits as SensorCorrect.
class SensorCorrector {
 public:
  explicit SensorCorrector(const SensorCalibration& cal);
  Vec3 operator()(const Vec3& raw, double temp_c) const;

 private:
  SensorCalibration cal_;
  double sin_u1_, cos_u1_, sin_u2_, cos_u2_, sin_u3_, cos_u3_;
  double r_[3][3];  // misalignment R
};

}  // namespace fluxtrim::models
