#include "src/core/joint_fit.h"

#include <algorithm>
#include <cmath>
#include <iomanip>
#include <limits>
#include <memory>
#include <sstream>
#include <stdexcept>
#include <vector>

#include <ceres/ceres.h>
#include <Eigen/Dense>

#include "io/error.h"
#include "io/sensor_file.h"
#include "models/fluxgate_sensor.h"
#include "models/tolles_lawson.h"
#include "src/core/butterworth.h"
#include "src/core/calibrate.h"
#include "src/core/lag.h"
#include "src/core/metrics.h"

namespace fluxtrim::core {
namespace {

constexpr double kRadToDeg = 180.0 / 3.14159265358979323846;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr int kSensorParameters = 9;  // gains, offsets nT, u1..u3 rad
constexpr std::size_t kChunkSamples = 2048;

// Central-difference steps of the sensor parameters in the TL cost. Each
// moves the calibrated field by about 0.5 nT on a 50,000 nT field (gain
// 1e-5, angle 1e-5 rad) or by 1 nT (offset): the terms are smooth in c, so
// the truncation error (step^2) is negligible and the rounding error of the
// difference (1e-16 x H / step) stays below 1e-9 relative.
constexpr double kStep[kSensorParameters] = {1e-5, 1e-5, 1e-5, 1.0, 1.0, 1.0,
                                             1e-5, 1e-5, 1e-5};

models::SensorCalibration FromVector(const double* x) {
  models::SensorCalibration cal;
  for (int i = 0; i < 3; ++i) {
    cal.gains[i] = x[i];
    cal.offsets_nT[i] = x[3 + i];
    cal.nonorthogonality_rad[i] = x[6 + i];
  }
  return cal;
}

struct Run {
  std::size_t begin = 0, end = 0;          // filtered samples [begin, end)
  std::size_t fit_begin = 0, fit_end = 0;  // residual samples
};

// Band-passed Tolles-Lawson residual of the joint problem (see header).
// Parameter blocks: theta (9), beta (free terms, equilibrated: a_j =
// beta_j / scale_j). Residual r = w (fbp - sum_j beta_j BP[A_j(theta)] /
// scale_j) over the residual samples of every run, in run order.
class TlCost : public ceres::CostFunction {
 public:
  struct Data {
    models::TermEngine::Options engine;
    std::size_t n = 0;
    const double* time = nullptr;
    const double *ex = nullptr, *ey = nullptr, *ez = nullptr;  // raw
    const double* f = nullptr;  // lag-shifted scalar field
    std::vector<const double*> aux;
    std::vector<Run> runs;
    std::vector<int> free;       // term columns in beta order
    std::vector<double> scale;   // per free column
    std::vector<double> fbp;     // band-passed f at the residual samples
    std::size_t residuals = 0;
    double weight = 1.0;
    const BandPass* band = nullptr;
  };

  explicit TlCost(const Data* data) : d_(data) {
    set_num_residuals(static_cast<int>(d_->residuals));
    mutable_parameter_block_sizes()->push_back(kSensorParameters);
    mutable_parameter_block_sizes()->push_back(
        static_cast<int>(d_->free.size()));
  }

  bool Evaluate(double const* const* parameters, double* residuals,
                double** jacobians) const override {
    const double* theta = parameters[0];
    const double* beta = parameters[1];
    const std::size_t m = d_->free.size();
    std::vector<double> w(TermCount(), 0.0);  // physical coefficients
    for (std::size_t j = 0; j < m; ++j) {
      w[static_cast<std::size_t>(d_->free[j])] = beta[j] / d_->scale[j];
    }
    const models::TermMatrix a = Terms(theta);
    if (!AllFinite(a)) return false;
    // Model interference H = A w, band-passed.
    std::vector<double> h(d_->n, 0.0);
    for (std::size_t i = 0; i < d_->n; ++i) {
      const double* row = &a.values[i * a.cols];
      double s = 0;
      for (std::size_t c = 0; c < a.cols; ++c) s += row[c] * w[c];
      h[i] = s;
    }
    std::vector<double> hbp = FilterAtResiduals(h);
    for (std::size_t r = 0; r < d_->residuals; ++r) {
      residuals[r] = d_->weight * (d_->fbp[r] - hbp[r]);
    }
    if (jacobians == nullptr) return true;
    if (jacobians[1] != nullptr) {
      std::vector<double> col(d_->n);
      for (std::size_t j = 0; j < m; ++j) {
        const std::size_t c = static_cast<std::size_t>(d_->free[j]);
        for (std::size_t i = 0; i < d_->n; ++i) col[i] = a.values[i * a.cols + c];
        const std::vector<double> bp = FilterAtResiduals(col);
        for (std::size_t r = 0; r < d_->residuals; ++r) {
          jacobians[1][r * m + j] = -d_->weight * bp[r] / d_->scale[j];
        }
      }
    }
    if (jacobians[0] != nullptr) {
      // d BP[A w] / d theta_k = BP[(A(theta + e_k) - A(theta - e_k)) w] / 2e:
      // one filtered series per parameter (the band-pass is linear).
      std::vector<double> g(d_->n);
      for (int k = 0; k < kSensorParameters; ++k) {
        double tp[kSensorParameters], tm[kSensorParameters];
        std::copy(theta, theta + kSensorParameters, tp);
        std::copy(theta, theta + kSensorParameters, tm);
        tp[k] += kStep[k];
        tm[k] -= kStep[k];
        const models::TermMatrix ap = Terms(tp), am = Terms(tm);
        for (std::size_t i = 0; i < d_->n; ++i) {
          const double* rp = &ap.values[i * ap.cols];
          const double* rm = &am.values[i * am.cols];
          double s = 0;
          for (std::size_t c = 0; c < ap.cols; ++c) s += (rp[c] - rm[c]) * w[c];
          g[i] = s / (2.0 * kStep[k]);
        }
        const std::vector<double> bp = FilterAtResiduals(g);
        for (std::size_t r = 0; r < d_->residuals; ++r) {
          const double v = -d_->weight * bp[r];
          jacobians[0][r * kSensorParameters + static_cast<std::size_t>(k)] =
              std::isfinite(v) ? v : 0.0;
        }
      }
    }
    return true;
  }

  // Term matrix with the fluxgate calibrated by theta (Bt = f).
  models::TermMatrix Terms(const double* theta) const {
    const models::SensorCalibration cal = FromVector(theta);
    std::vector<double> bx(d_->n), by(d_->n), bz(d_->n);
    for (std::size_t i = 0; i < d_->n; ++i) {
      const models::Vec3 b =
          models::SensorCorrect(cal, {d_->ex[i], d_->ey[i], d_->ez[i]});
      bx[i] = b.x;
      by[i] = b.y;
      bz[i] = b.z;
    }
    return models::BuildTermMatrix(d_->engine, d_->n, d_->time, bx.data(),
                                   by.data(), bz.data(), d_->f, d_->aux);
  }

  // Band-passes x over each run; returns the residual samples in order.
  std::vector<double> FilterAtResiduals(const std::vector<double>& x) const {
    std::vector<double> out;
    out.reserve(d_->residuals);
    std::vector<double> y;
    for (const Run& run : d_->runs) {
      y.resize(run.end - run.begin);
      d_->band->Filter(x.data() + run.begin, run.end - run.begin, y.data());
      for (std::size_t i = run.fit_begin; i < run.fit_end; ++i) {
        out.push_back(y[i - run.begin]);
      }
    }
    return out;
  }

 private:
  std::size_t TermCount() const { return models::TermCount(d_->engine.terms); }
  bool AllFinite(const models::TermMatrix& a) const {
    for (const Run& run : d_->runs) {
      for (std::size_t i = run.begin * a.cols; i < run.end * a.cols; ++i) {
        if (!std::isfinite(a.values[i])) return false;
      }
    }
    return true;
  }
  const Data* d_;
};

// |B(theta)| - f over the magnitude samples.
std::vector<double> MagnitudeResiduals(const CalibrationData& data,
                                       const double* theta) {
  const models::SensorCalibration cal = FromVector(theta);
  std::vector<double> r(data.n);
  for (std::size_t i = 0; i < data.n; ++i) {
    const models::Vec3 b = models::SensorCorrect(
        cal, {data.raw[3 * i], data.raw[3 * i + 1], data.raw[3 * i + 2]});
    r[i] = std::sqrt(b.x * b.x + b.y * b.y + b.z * b.z) - data.f_ref[i];
  }
  return r;
}

void AddMagnitudeCosts(const CalibrationData& data, double weight,
                       double* theta, ceres::Problem* problem) {
  ParameterLayout layout;  // 9 parameters: gains, offsets, angles
  for (std::size_t begin = 0; begin < data.n; begin += kChunkSamples) {
    const std::size_t end = std::min(data.n, begin + kChunkSamples);
    problem->AddResidualBlock(
        MakeChunkCost(&data, layout, begin, end, weight, 0.0).release(),
        nullptr, theta);
  }
}

ceres::Solver::Options SolverOptions(const JointFitOptions& options) {
  ceres::Solver::Options so;
  so.trust_region_strategy_type = ceres::LEVENBERG_MARQUARDT;
  so.linear_solver_type = ceres::DENSE_QR;
  so.max_num_iterations = options.max_iterations;
  so.num_threads = options.num_threads;
  so.function_tolerance = 1e-12;
  so.parameter_tolerance = 1e-12;
  so.logging_type = ceres::SILENT;
  return so;
}

void SetVector(proto::Vector3* v, const double* x, double scale) {
  v->set_x(x[0] * scale);
  v->set_y(x[1] * scale);
  v->set_z(x[2] * scale);
}

proto::SensorCalibration ToSensorProto(const double* theta) {
  proto::SensorCalibration out;
  ToProto(FromVector(theta), false, &out);
  out.set_schema_version(io::kSensorSchemaVersion);
  return out;
}

JointFitResult Refuse(JointFitResult r, const std::string& message) {
  r.usable = false;
  r.message = message;
  return r;
}

}  // namespace

bool JointFitOptions::IsValid(std::string* error) const {
  if (!fit.IsValid(error)) return false;
  if (!(max_std_error_nT > 0)) {
    *error = "max_std_error_nT must be positive";
    return false;
  }
  if (max_iterations < 1 || num_threads < 1 || min_samples < 10) {
    *error = "max_iterations and num_threads must be >= 1, min_samples >= 10";
    return false;
  }
  return true;
}

io::Table CalibratedTable(const io::Table& table,
                          const proto::SensorCalibration& calibration) {
  io::Table out = table;
  ApplySensorOptions options;
  options.subtract_aux = false;  // as models::Compensator
  ApplySensorCalibration(calibration, &out, options);
  return out;
}

FitResult FitWithSensor(const io::Table& table,
                        const proto::SensorCalibration& calibration,
                        const FitOptions& options) {
  return FitModel(CalibratedTable(table, calibration), options);
}

void AttachSensor(const proto::SensorCalibration& calibration,
                  proto::CompensationModel* model) {
  *model->mutable_sensor() = calibration;
  if (model->sensor().schema_version() == 0) {
    model->mutable_sensor()->set_schema_version(io::kSensorSchemaVersion);
  }
}

JointFitResult JointFit(const io::Table& table,
                        const JointFitOptions& options) {
  std::string error;
  if (!options.IsValid(&error)) throw std::invalid_argument(error);
  const std::string& source = options.fit.source;
  for (const char* name : {"time", "bx", "by", "bz", "f"}) {
    if (!table.Has(name)) {
      throw io::InputError(
          source, name,
          std::string("the joint sensor fit needs channel '") + name +
              (std::string(name) == "f"
                   ? "': a scalar sensor pins the field's absolute level "
                     "(without one, calibrate against WMM2025 with "
                     "`calibrate` and fit with --sensor)"
                   : "'"));
    }
  }
  JointFitResult result;
  const std::vector<double>& time = table.Column("time");
  const std::vector<double>& ex = table.Column("bx");
  const std::vector<double>& ey = table.Column("by");
  const std::vector<double>& ez = table.Column("bz");
  const std::vector<double>& f = table.Column("f");
  const std::size_t n = table.rows();

  // --- Stage 1: magnitude-only calibration against f.
  CalibrationData mag;
  for (std::size_t i = 0; i < n; ++i) {
    if (!(std::isfinite(ex[i]) && std::isfinite(ey[i]) &&
          std::isfinite(ez[i]) && std::isfinite(f[i]))) {
      continue;
    }
    mag.raw.insert(mag.raw.end(), {ex[i], ey[i], ez[i]});
    mag.f_ref.push_back(f[i]);
  }
  mag.n = mag.f_ref.size();
  result.magnitude_samples = mag.n;
  if (mag.n < options.min_samples) {
    return Refuse(result, "only " + std::to_string(mag.n) +
                              " samples with fluxgate and scalar sensor (need " +
                              std::to_string(options.min_samples) + ")");
  }
  double theta[kSensorParameters] = {1, 1, 1, 0, 0, 0, 0, 0, 0};
  result.magnitude_rms_raw_nT = FiniteRms(MagnitudeResiduals(mag, theta));
  {
    ceres::Problem problem;
    AddMagnitudeCosts(mag, 1.0, theta, &problem);
    ceres::Solver::Summary summary;
    ceres::Solve(SolverOptions(options), &problem, &summary);
  }
  result.stage1 = ToSensorProto(theta);
  result.magnitude_rms_stage1_nT = FiniteRms(MagnitudeResiduals(mag, theta));

  // --- Stage 2: the ordinary fit on the stage-1 calibrated fluxgate.
  const FitResult fit2 = FitWithSensor(table, result.stage1, options.fit);
  if (!fit2.usable) {
    result.fit = fit2;
    return Refuse(result, fit2.message);
  }

  // --- Stage 3: the joint problem.
  const double rate = fit2.engine.sample_rate_hz;
  std::vector<double> f_shift = f;
  if (fit2.lag_estimated && fit2.lag_s != 0.0) {
    f_shift = ShiftByLag(time, f, fit2.lag_s, rate, fit2.engine.gap_factor);
  }
  const BandPass band(fit2.band, rate);
  TlCost::Data d;
  d.engine = fit2.engine;
  d.n = n;
  d.time = time.data();
  d.ex = ex.data();
  d.ey = ey.data();
  d.ez = ez.data();
  d.f = f_shift.data();
  for (const std::string& a : fit2.engine.terms.aux) {
    d.aux.push_back(table.Column(a).data());
  }
  d.band = &band;
  // Runs: consecutive samples without flags (a flag marks gaps, derivative
  // edges and bad samples) and with a finite scalar field, long enough for
  // the filter; the residual samples drop the edge transients as the fit
  // does (FitOptions::edge_trim_s, automatic rule of fit.h).
  TlCost probe(&d);
  const models::TermMatrix a0 = probe.Terms(theta);
  const double trim_s =
      options.fit.edge_trim_s > 0
          ? options.fit.edge_trim_s
          : std::max(0.5 / fit2.band.low_hz, options.fit.max_lag_s + 2.0 / rate);
  const std::size_t trim = static_cast<std::size_t>(std::ceil(trim_s * rate));
  auto good = [&](std::size_t i) {
    if (a0.flags[i] != 0 || !std::isfinite(f_shift[i])) return false;
    for (std::size_t c = 0; c < a0.cols; ++c) {
      if (!std::isfinite(a0.values[i * a0.cols + c])) return false;
    }
    return true;
  };
  for (std::size_t i = 0; i < n;) {
    if (!good(i)) {
      ++i;
      continue;
    }
    std::size_t j = i;
    while (j < n && good(j)) ++j;
    Run run{i, j, i + trim, j > trim ? j - trim : 0};
    if (j - i >= band.min_length() && run.fit_end > run.fit_begin) {
      d.runs.push_back(run);
      d.residuals += run.fit_end - run.fit_begin;
    }
    i = j;
  }
  result.tl_samples = d.residuals;
  if (d.residuals < options.min_samples) {
    return Refuse(result, "too few band-passed samples for the joint fit (" +
                              std::to_string(d.residuals) + ")");
  }
  {
    std::vector<double> fvec(f_shift);
    d.fbp = probe.FilterAtResiduals(fvec);
  }
  // Free terms, equilibrated by the RMS of their band-passed column.
  std::vector<double> beta;
  {
    std::vector<double> col(n);
    for (std::size_t c = 0; c < fit2.coefficients.size(); ++c) {
      if (fit2.coefficients[c].held) continue;
      for (std::size_t i = 0; i < n; ++i) col[i] = a0.values[i * a0.cols + c];
      const double s = FiniteRms(probe.FilterAtResiduals(col));
      if (!(s > 0)) continue;
      d.free.push_back(static_cast<int>(c));
      d.scale.push_back(s);
      beta.push_back(fit2.values[c] * s);
    }
  }
  if (d.free.empty()) {
    return Refuse(result, "no Tolles-Lawson term is determined by the flight");
  }
  const double w_m = 1.0 / std::max(result.magnitude_rms_stage1_nT, 1e-6);
  const double sigma_t = std::max(fit2.residual_sigma_nT, 1e-6);
  d.weight = std::sqrt(std::max(fit2.noise_gain, 1e-12)) / sigma_t;
  {
    TlCost start(&d);
    std::vector<double> r(d.residuals);
    const double* params[2] = {theta, beta.data()};
    start.Evaluate(params, r.data(), nullptr);
    result.tl_rms_start_nT = FiniteRms(r) / d.weight;
  }

  ceres::Problem problem;
  AddMagnitudeCosts(mag, w_m, theta, &problem);
  problem.AddResidualBlock(new TlCost(&d), nullptr, theta, beta.data());
  ceres::Solver::Summary summary;
  ceres::Solve(SolverOptions(options), &problem, &summary);
  result.iterations = static_cast<int>(summary.iterations.size());
  if (!summary.IsSolutionUsable()) {
    return Refuse(result, "the joint Ceres problem failed: " + summary.message);
  }
  result.magnitude_rms_joint_nT = FiniteRms(MagnitudeResiduals(mag, theta));
  {
    TlCost end(&d);
    std::vector<double> r(d.residuals);
    const double* params[2] = {theta, beta.data()};
    end.Evaluate(params, r.data(), nullptr);
    result.tl_rms_joint_nT = FiniteRms(r) / d.weight;
  }

  // Standard errors of theta from the joint problem (weights are inverse
  // standard deviations, so no further scaling).
  double se[kSensorParameters];
  std::fill(se, se + kSensorParameters,
            std::numeric_limits<double>::infinity());
  {
    // Covariance (J^T J)^-1 of the whole problem, theta block. Formed here
    // on the column-equilibrated J^T J (25 x 25 or so): gains and offsets
    // differ in scale by 1e4-1e5, which defeats an unscaled rank test, and
    // a truncated pseudo-inverse would hide the large variance of a poorly
    // determined direction instead of reporting it.
    ceres::CRSMatrix crs;
    ceres::Problem::EvaluateOptions eo;
    eo.parameter_blocks = {theta, beta.data()};
    eo.num_threads = options.num_threads;
    problem.Evaluate(eo, nullptr, nullptr, nullptr, &crs);
    const int p = crs.num_cols;
    Eigen::MatrixXd jtj = Eigen::MatrixXd::Zero(p, p);
    for (int r = 0; r < crs.num_rows; ++r) {
      for (int u = crs.rows[r]; u < crs.rows[r + 1]; ++u) {
        for (int v = crs.rows[r]; v < crs.rows[r + 1]; ++v) {
          jtj(crs.cols[u], crs.cols[v]) += crs.values[u] * crs.values[v];
        }
      }
    }
    Eigen::VectorXd scale = jtj.diagonal().cwiseSqrt();
    bool ok = (scale.array() > 0).all() && scale.allFinite();
    if (ok) {
      const Eigen::MatrixXd e =
          scale.cwiseInverse().asDiagonal() * jtj * scale.cwiseInverse().asDiagonal();
      Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(e);
      const Eigen::VectorXd lambda = eig.eigenvalues();
      // Relative eigenvalue below 1e-14: numerically singular (undetermined).
      if (lambda.minCoeff() > 1e-14 * lambda.maxCoeff()) {
        const Eigen::MatrixXd inv = eig.eigenvectors() *
                                    lambda.cwiseInverse().asDiagonal() *
                                    eig.eigenvectors().transpose();
        for (int k = 0; k < kSensorParameters; ++k) {
          se[k] = std::sqrt(inv(k, k)) / scale(k);
        }
      }
    }
  }
  proto::SensorCalibration cal = ToSensorProto(theta);
  SetVector(cal.mutable_gains_std_error(), se, 1.0);
  SetVector(cal.mutable_offsets_std_error_nt(), se + 3, 1.0);
  SetVector(cal.mutable_nonorthogonality_std_error_deg(), se + 6, kRadToDeg);
  cal.set_residual_rms_before_nt(result.magnitude_rms_raw_nT);
  cal.set_residual_rms_after_nt(result.magnitude_rms_joint_nT);
  cal.set_reference("scalar sensor, joint with Tolles-Lawson");
  cal.set_mode("joint");
  cal.set_samples_used(static_cast<unsigned>(mag.n));
  cal.set_source(source);
  result.calibration = cal;

  // Determination: the rule of calibrate (std error x effect on the field).
  double mean_b = 0;
  for (double v : mag.f_ref) mean_b += v;
  mean_b /= static_cast<double>(mag.n);
  static const char* kNames[kSensorParameters] = {
      "gain x", "gain y", "gain z", "offset x", "offset y", "offset z",
      "non-orthogonality u1", "non-orthogonality u2", "non-orthogonality u3"};
  std::vector<std::string> undetermined;
  for (int k = 0; k < kSensorParameters; ++k) {
    const double effect = (k >= 3 && k < 6) ? se[k] : se[k] * mean_b;
    if (!(effect <= options.max_std_error_nT)) {
      std::ostringstream s;
      s << kNames[k] << " (" << std::setprecision(3) << effect << " nT)";
      undetermined.push_back(s.str());
    }
  }
  if (!undetermined.empty()) {
    std::string list;
    for (const std::string& u : undetermined) list += (list.empty() ? "" : ", ") + u;
    return Refuse(result,
                  "the flight does not determine the sensor parameter(s) " +
                      list + " to " + std::to_string(options.max_std_error_nT) +
                      " nT: fly attitudes that turn the field through every "
                      "sensor axis (tilts of 20-30 deg at several headings), "
                      "or calibrate on a rotation flight and fit with --sensor");
  }

  // --- Stage 4: the reported fit, on the jointly calibrated fluxgate.
  result.fit = FitWithSensor(table, cal, options.fit);
  if (!result.fit.usable) return Refuse(result, result.fit.message);
  result.usable = true;
  return result;
}

std::string FormatJointSensorSummary(const JointFitResult& r) {
  std::ostringstream s;
  const proto::SensorCalibration& c = r.calibration;
  s << "joint sensor calibration (gains, offsets, non-orthogonality with the "
       "Tolles-Lawson coefficients, one Ceres problem):\n";
  s << std::fixed;
  auto line = [&s](const char* name, const proto::Vector3& v,
                   const proto::Vector3& e, int digits, const char* unit) {
    s << "  " << std::left << std::setw(19) << name << std::right;
    for (const auto& [x, ex] : {std::pair{v.x(), e.x()}, std::pair{v.y(), e.y()},
                                std::pair{v.z(), e.z()}}) {
      s << std::fixed << std::setprecision(digits) << std::setw(11) << x
        << " +-" << std::defaultfloat << std::setprecision(2) << std::setw(8)
        << ex;
    }
    s << " " << unit << "\n";
  };
  line("gains", c.gains(), c.gains_std_error(), 6, "");
  line("offsets", c.offsets_nt(), c.offsets_std_error_nt(), 2, "nT");
  line("non-orthogonality", c.nonorthogonality_deg(),
       c.nonorthogonality_std_error_deg(), 4, "deg (u1 u2 u3)");
  s << std::fixed << std::setprecision(3) << "  |B| - f RMS: raw " << r.magnitude_rms_raw_nT
    << " nT, magnitude-only " << r.magnitude_rms_stage1_nT << " nT, joint "
    << r.magnitude_rms_joint_nT << " nT (" << r.magnitude_samples
    << " samples)\n";
  s << "  band-passed TL residual RMS: start " << r.tl_rms_start_nT
    << " nT, joint " << r.tl_rms_joint_nT << " nT (" << r.tl_samples
    << " samples, " << r.iterations << " iterations)\n";
  s << "  misalignment: not determined (magnitude-only reference)\n";
  return s.str();
}

}  // namespace fluxtrim::core
