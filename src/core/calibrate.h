#pragma once
// Fluxgate calibration: fits the sensor model of models/fluxgate_sensor.h,
//
//   E = S P R B + o,
//
// to a recording, with Ceres (Levenberg-Marquardt).
//
// Scalar (magnitude-only) calibration, after Merayo et al. 2000 ("Scalar
// calibration of vector magnetometers", Meas. Sci. Technol. 11:120; form as
// recalled from memory): 3 gains, 3 offsets, 3 non-orthogonality angles
// such that |B| = |P^-1 S^-1 (E - o)| matches a reference magnitude F, the
// scalar sensor `f` when the recording has one, otherwise the WMM2025 field
// magnitude at the recording's position and date. The magnitude is
// invariant under any rotation of B, so a magnitude fit never determines
// the misalignment R (Merayo et al. 2000): R is then reported as "not
// determined", never as a number.
//
// Vector (attitude-aided) calibration: with roll, pitch, heading (degrees,
// 3-2-1 sequence, heading from true north; body x forward, y starboard,
// z down) and position/date, the WMM2025 vector rotated into the body frame
// is a reference for the calibrated vector, and the 3 misalignment angles
// join the fit (12 parameters). Magnitude and vector residuals are fitted
// together, each class weighted by its own residual RMS (estimated from the
// data), because attitude errors make vector residuals far larger than
// magnitude ones.
//
// Extensions: linear temperature coefficients of gains and offsets (a
// temperature channel, deg C) and body-fixed fields proportional to extra
// channels (currents):
//
//   B_at_sensor = B_earth + sum_k a_k(t) g_k      g_k in nT per unit.
//
// Platform hard iron (a body-fixed field) adds to the offsets and is not
// separable from them; platform soft iron (a field-proportional matrix)
// folds into S P (its symmetric part is indistinguishable from gains and
// non-orthogonality). What a fit cannot separate is named in the summary.
//
// Standard errors come from ceres::Covariance scaled by the residual
// variance. A fit whose parameters are not determined by the recording
// (standard error times the parameter's effect on the field above
// max_std_error_nT) is refused with what to fly instead.

#include <cstddef>
#include <limits>
#include <memory>
#include <string>
#include <vector>

#include <ceres/cost_function.h>

#include "io/table.h"
#include "models/fluxgate_sensor.h"
#include "proto/calibration_summary.pb.h"
#include "proto/sensor.pb.h"

namespace fluxtrim::core {

struct CalibrateOptions {
  enum class Mode {
    kAuto,    // vector when roll, pitch, heading, position and date exist
    kScalar,  // magnitude only
    kVector,  // attitude-aided; needs roll, pitch, heading, lat, lon, alt
  };
  Mode mode = Mode::kAuto;
  // Decimal year of the recording for WMM2025 (models::ParseDecimalYear);
  // NaN: none. Required when there is no scalar sensor and for vector mode.
  double decimal_year = std::numeric_limits<double>::quiet_NaN();
  // Use the channel `f` as the reference magnitude when it exists; false
  // uses the WMM2025 magnitude even then.
  bool use_scalar_sensor = true;
  // Temperature channel (deg C); empty: no temperature coefficients.
  std::string temperature_channel;
  // Extra channels whose field at the sensor is fitted (at most
  // kMaxAuxChannels).
  std::vector<std::string> aux_channels;
  // A parameter is "not determined" when its standard error times its
  // effect on the field (gain or angle x mean |B|, offset x 1, temperature
  // coefficient x the largest |T - T_ref|, coupling x the largest |a_k|)
  // exceeds this, nT. Our own choice: 2 nT is the order of a good
  // fluxgate's stated accuracy.
  double max_std_error_nT = 2.0;
  // Fewer usable samples than this is refused.
  std::size_t min_samples = 100;
  int max_iterations = 100;
  int num_threads = 2;
  // Name of the recording, for the summary.
  std::string source;

  static constexpr int kMaxAuxChannels = 6;
  bool IsValid(std::string* error) const;
};

// Result of Calibrate. When summary.accepted() is false the calibration was
// refused (summary.refusal() says why and what to fly) and `calibration`
// must not be used.
struct CalibrateResult {
  proto::CalibrationSummary summary;
  proto::SensorCalibration calibration;
  // The same calibration for the models:: functions (radians); the
  // misalignment is zero when it was not determined.
  models::SensorCalibration model;
};

// Calibrates from the channels bx, by, bz (raw fluxgate, nT) and, as the
// options and channels allow, f, lat, lon, alt, roll, pitch, heading, the
// temperature channel and the aux channels. Rows where any used channel is
// NaN are skipped. Throws std::invalid_argument on invalid options or when
// a needed channel or the date is missing (the message names it). A fit
// that is not usable is returned with summary.accepted() == false.
CalibrateResult Calibrate(const io::Table& table,
                          const CalibrateOptions& options);

// Human-readable summary: model convention, parameters with standard
// errors, residual RMS before -> after, coverage, separability, refusal.
std::string FormatCalibrationSummary(const proto::CalibrationSummary& summary);

// The forward-model convention in words (also in the summary).
std::string SensorModelConvention();

// --- Conversions and application (for fit --sensor, apply, stream) -------

// Degrees in the proto, radians in models::. The misalignment is taken only
// when has_misalignment() is true.
models::SensorCalibration FromProto(const proto::SensorCalibration& cal);
// Fills gains, offsets, angles, temperature coefficients and
// reference_temp_c; leaves every other field of *out as it is.
void ToProto(const models::SensorCalibration& cal, bool has_misalignment,
             proto::SensorCalibration* out);

struct ApplySensorOptions {
  // Subtract sum_k a_k(t) g_k of the calibration's aux couplings, so that
  // bx, by, bz become the Earth's field (body frame; sensor frame when the
  // misalignment is not determined).
  bool subtract_aux = true;
};

// Replaces bx, by, bz of *table (nT) by the calibrated field
// R^T P^-1 S^-1 (E - o(T)) [- sum_k a_k g_k]. Needs the temperature channel
// when the calibration names one and the aux channels when subtract_aux and
// the calibration has couplings; throws std::invalid_argument naming a
// missing channel. Rows with a NaN input become NaN.
void ApplySensorCalibration(const proto::SensorCalibration& cal,
                            io::Table* table,
                            const ApplySensorOptions& options = {});

// --- Coverage -------------------------------------------------------------

// Equal-area grid on the unit sphere: kCoverageBands bands of equal height
// in z (Archimedes: equal z-width is equal area), each cut into
// kCoverageSectors equal longitude sectors.
inline constexpr int kCoverageBands = 8;
inline constexpr int kCoverageSectors = 16;

// Coverage of the directions of the vectors (x[i], y[i], z[i]), i < n
// (zero vectors are skipped).
proto::DirectionCoverage ComputeDirectionCoverage(std::size_t n,
                                                  const double* x,
                                                  const double* y,
                                                  const double* z);

// --- Building blocks, exposed for tests ----------------------------------

// Layout of the single parameter vector x of the fit:
//   [0,3) gains   [3,6) offsets nT   [6,9) non-orthogonality u1..u3 rad
//   [9,12) misalignment a_x, a_y, a_z rad              (misalignment only)
//   then gain_tc 1/K (3), offset_tc nT/K (3)            (temperature only)
//   then g_k nT/unit (3 each, body frame)               (aux only)
struct ParameterLayout {
  bool misalignment = false;
  bool temperature = false;
  int aux_count = 0;

  int gains() const { return 0; }
  int offsets() const { return 3; }
  int nonorthogonality() const { return 6; }
  int misalign() const { return 9; }
  int gain_tc() const { return misalignment ? 12 : 9; }
  int offset_tc() const { return gain_tc() + 3; }
  int aux(int k) const { return gain_tc() + (temperature ? 6 : 0) + 3 * k; }
  int size() const { return aux(aux_count); }
  // Residuals per sample: 1 (magnitude) or 4 (magnitude, then x, y, z).
  int residuals_per_sample() const { return misalignment ? 4 : 1; }
};

// Samples of a fit, row-major.
struct CalibrationData {
  std::size_t n = 0;
  std::vector<double> raw;         // 3n: E, nT
  std::vector<double> f_ref;       // n: reference magnitude, nT
  std::vector<double> b_ref;       // 3n: body-frame reference (vector mode)
  std::vector<double> dtemp_k;     // n: T - T_ref, K (temperature only)
  std::vector<double> aux;         // n * aux_count (aux only)
};

// One Ceres cost function for samples [begin, end): residuals, per sample,
//   r_m = w_magnitude (|b| - F)
//   r_v = w_vector (b - b_ref)          (misalignment layouts only)
// with b = R^T P^-1 S(T)^-1 (E - o(T)) - sum_k a_k g_k. One parameter block
// of layout.size(); jacobian row-major: jacobians[0][r * size + c] =
// d residual r / d x[c]. Derivatives by automatic differentiation (Jets)
// of the same templated code that computes the residuals.
std::unique_ptr<ceres::CostFunction> MakeChunkCost(
    const CalibrationData* data, const ParameterLayout& layout,
    std::size_t begin, std::size_t end, double w_magnitude,
    double w_vector);

}  // namespace fluxtrim::core
