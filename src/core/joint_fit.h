#pragma once
// Compensation fits that use a fluxgate calibration (models/fluxgate_sensor.h,
// forward model E = S P R B + o; src/core/calibrate.h):
//
//  * FitWithSensor (`fit --sensor SENSOR`): the fluxgate columns are
//    replaced by the calibrated field B = R^T P^-1 S^-1 (E - o(T)) before the
//    ordinary Tolles-Lawson fit (core::FitModel), so the direction cosines,
//    and |B| where there is no scalar sensor, come from calibrated vectors.
//    The calibration's aux couplings are NOT subtracted from the vector:
//    models::Compensator (apply, stream, runtime) does not subtract them
//    either, and a current's field on the total field is what the fit's own
//    aux terms (--aux) model. AttachSensor stores the calibration in the
//    model so that apply calibrates exactly as the fit did.
//
//  * JointFit (`fit --joint-sensor`): the 9 sensor parameters (gains,
//    offsets, non-orthogonality) and the Tolles-Lawson coefficients in one
//    Ceres problem. Needs a scalar sensor f. Residuals:
//
//      magnitude, every good sample i (unfiltered):
//        r_i = w_m (|B_i(theta)| - f_i)
//      Tolles-Lawson, every fitted sample j (band-passed):
//        r_j = w_t BP[f - A(theta) a]_j
//
//    with B(theta) = P^-1 S^-1 (E - o), A(theta) the term matrix of
//    models::BuildTermMatrix built from c = B(theta)/|B(theta)| and Bt = f,
//    BP the zero-phase band-pass of the fit, a the free coefficients.
//    The fluxgate and the scalar sensor see the same total field (platform
//    interference included), so the magnitude residual holds without any
//    interference term; the platform's field on the total field is the TL
//    residual's business.
//
//    Choice of formulation (and why): the band-pass is linear, so BP[A a]
//    is filtered once per evaluation and column, and its derivative with
//    respect to theta_k is BP[(dA/dtheta_k) a]: ONE filtered series per
//    sensor parameter (central differences of the unfiltered A(theta) a),
//    not one per column. Unfiltered TL residuals with a polynomial nuisance
//    were rejected: geology and diurnal variation along a box are not
//    polynomial and would leak into the coefficients.
//    Stages: (1) magnitude-only calibration against f (the same Ceres
//    residuals as `calibrate`, core::MakeChunkCost); (2) core::FitModel on
//    the stage-1 calibrated fluxgate: lag, held terms, band, rows; (3) the
//    joint problem from (1)+(2), f shifted by the stage-2 lag, held terms
//    fixed at 0, no ridge; (4) core::FitModel again on the fluxgate
//    calibrated with the joint estimate, for the coefficients, metrics and
//    cross-validation that `fit` reports (given theta, the joint optimum in
//    a is that linear least-squares fit, up to ridge and robust loss).
//    Weights: w_m = 1 / RMS of the stage-1 magnitude residual;
//    w_t = sqrt(noise_gain) / sigma_t with sigma_t the stage-2 band-passed
//    residual: the white-noise equivalent of a band-passed residual (the
//    filter correlates neighbouring samples; noise_gain = sum g_k^2 of its
//    impulse response).
//
//    Limits: the direction cosines change only by about |o|/|B| or by
//    the gain errors (1e-3 for 50 nT of offset), so the TL residuals pull
//    the sensor parameters weakly; the magnitude residuals, pinned by the
//    scalar sensor's absolute level, determine them. What a magnitude fit
//    cannot determine (the misalignment R: never fitted here; a gain and
//    offset of an axis whose field hardly changes, e.g. z in level flight)
//    the TL part cannot either: such parameters are refused with what to
//    fly (same rule as `calibrate`). Temperature coefficients and aux
//    couplings are not part of the joint sensor model (use `calibrate` and
//    --sensor). The lag of the scalar sensor is held at its stage-2 value.

#include <string>

#include "io/table.h"
#include "proto/model.pb.h"
#include "proto/sensor.pb.h"
#include "src/core/fit.h"

namespace fluxtrim::core {

// A copy of table with bx, by, bz replaced by the calibrated field (nT,
// body frame; sensor frame when the misalignment is not determined). The
// calibration's aux couplings are not subtracted (see above). Throws
// std::invalid_argument naming a channel the calibration needs (its
// temperature channel) that the table lacks.
io::Table CalibratedTable(const io::Table& table,
                          const proto::SensorCalibration& calibration);

// FitModel on CalibratedTable(table, calibration).
FitResult FitWithSensor(const io::Table& table,
                        const proto::SensorCalibration& calibration,
                        const FitOptions& options);

// Stores the calibration in the model (field `sensor`), so that apply
// calibrates the fluxgate as the fit did.
void AttachSensor(const proto::SensorCalibration& calibration,
                  proto::CompensationModel* model);

struct JointFitOptions {
  FitOptions fit;  // options of the TL fit (stages 2 and 4)
  // A sensor parameter is "not determined" when its standard error times
  // its effect on the field (gain or angle x mean |B|, offset x 1) exceeds
  // this, nT (the rule of CalibrateOptions::max_std_error_nT).
  double max_std_error_nT = 2.0;
  int max_iterations = 50;
  int num_threads = 2;
  std::size_t min_samples = 100;
  bool IsValid(std::string* error) const;
};

struct JointFitResult {
  // False: refused; message says why and what to fly. Then calibration and
  // fit must not be used (fit may still hold a partial result).
  bool usable = false;
  std::string message;
  // Joint estimate with standard errors (ceres::Covariance of the joint
  // problem), reference "scalar sensor, joint with Tolles-Lawson",
  // mode "joint".
  proto::SensorCalibration calibration;
  // Stage-1 (magnitude-only) estimate, for comparison.
  proto::SensorCalibration stage1;
  // Final TL fit on the jointly calibrated fluxgate (stage 4).
  FitResult fit;
  // RMS of |B(theta)| - f over the magnitude samples, nT: raw fluxgate,
  // stage 1, joint.
  double magnitude_rms_raw_nT = 0;
  double magnitude_rms_stage1_nT = 0;
  double magnitude_rms_joint_nT = 0;
  // RMS of the band-passed TL residual in the joint problem: at its start
  // (stage 1 + 2) and at its solution, nT.
  double tl_rms_start_nT = 0;
  double tl_rms_joint_nT = 0;
  int iterations = 0;
  std::size_t magnitude_samples = 0;
  std::size_t tl_samples = 0;
};

// Runs the four stages above. Needs bx, by, bz, f (throws io::InputError
// naming options.fit.source when f is missing) and whatever the TL options
// need; throws std::invalid_argument for invalid options.
JointFitResult JointFit(const io::Table& table, const JointFitOptions& options);

// Text block for the fit summary: the joint sensor estimate with standard
// errors and the residuals of each stage.
std::string FormatJointSensorSummary(const JointFitResult& result);

}  // namespace fluxtrim::core
