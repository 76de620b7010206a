#include "src/core/calibrate.h"

#include <algorithm>
#include <chrono>
#include <cmath>
#include <cstdio>
#include <sstream>
#include <stdexcept>

#include <Eigen/Dense>
#include <ceres/ceres.h>

#include "models/wmm.h"

namespace fluxtrim::core {
namespace {

constexpr double kPi = 3.14159265358979323846;
constexpr double kDeg = kPi / 180.0;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

// Samples per Ceres residual block. One block per sample costs Ceres
// bookkeeping per sample; 2048 keeps the evaluation in tight loops and
// still gives the threads enough blocks to share.
constexpr std::size_t kChunkSamples = 2048;

// --- The templated model -------------------------------------------------

// Everything that depends on the parameters only, computed once per chunk:
// M = R^T P^-1 (lower triangular P^-1 when there is no misalignment).
template <typename T>
struct ModelCoefficients {
  T m[3][3];
  T s[3], inv_s[3], o[3];
  T gtc[3], otc[3];
};

template <typename T>
void PrepareCoefficients(const ParameterLayout& layout, const T* x,
                         ModelCoefficients<T>* c) {
  using std::cos;
  using std::sin;
  for (int i = 0; i < 3; ++i) {
    c->s[i] = x[layout.gains() + i];
    c->inv_s[i] = T(1.0) / c->s[i];
    c->o[i] = x[layout.offsets() + i];
    c->gtc[i] = layout.temperature ? x[layout.gain_tc() + i] : T(0.0);
    c->otc[i] = layout.temperature ? x[layout.offset_tc() + i] : T(0.0);
  }
  // P rows [1,0,0], [a,b,0], [cc,d,e] (models/fluxgate_sensor.h); its
  // inverse by forward substitution.
  const T u1 = x[layout.nonorthogonality() + 0];
  const T u2 = x[layout.nonorthogonality() + 1];
  const T u3 = x[layout.nonorthogonality() + 2];
  const T a = sin(u1), b = cos(u1);
  const T cc = sin(u2), d = sin(u3) * cos(u2), e = cos(u2) * cos(u3);
  T pinv[3][3];
  pinv[0][0] = T(1.0);
  pinv[0][1] = T(0.0);
  pinv[0][2] = T(0.0);
  pinv[1][0] = -a / b;
  pinv[1][1] = T(1.0) / b;
  pinv[1][2] = T(0.0);
  pinv[2][0] = (a * d - b * cc) / (b * e);
  pinv[2][1] = -d / (b * e);
  pinv[2][2] = T(1.0) / e;
  if (!layout.misalignment) {
    for (int i = 0; i < 3; ++i)
      for (int j = 0; j < 3; ++j) c->m[i][j] = pinv[i][j];
    return;
  }
  // R = Rx(ax) Ry(ay) Rz(az), as in models/fluxgate_sensor.cc.
  const T ax = x[layout.misalign() + 0];
  const T ay = x[layout.misalign() + 1];
  const T az = x[layout.misalign() + 2];
  const T cx = cos(ax), sx = sin(ax), cy = cos(ay), sy = sin(ay);
  const T cz = cos(az), sz = sin(az);
  T r[3][3];
  r[0][0] = cy * cz;
  r[0][1] = -cy * sz;
  r[0][2] = sy;
  r[1][0] = cx * sz + sx * sy * cz;
  r[1][1] = cx * cz - sx * sy * sz;
  r[1][2] = -sx * cy;
  r[2][0] = sx * sz - cx * sy * cz;
  r[2][1] = sx * cz + cx * sy * sz;
  r[2][2] = cx * cy;
  for (int i = 0; i < 3; ++i) {
    for (int j = 0; j < 3; ++j) {
      c->m[i][j] = r[0][i] * pinv[0][j] + r[1][i] * pinv[1][j] +
                   r[2][i] * pinv[2][j];
    }
  }
}

// Residuals of sample i (see MakeChunkCost).
template <typename T>
void SampleResiduals(const ParameterLayout& layout,
                     const ModelCoefficients<T>& c, const T* x,
                     const CalibrationData& data, std::size_t i,
                     double w_magnitude, double w_vector, T* r) {
  using std::sqrt;
  const double* e = &data.raw[3 * i];
  T q[3];
  if (layout.temperature) {
    const double dt = data.dtemp_k[i];
    for (int k = 0; k < 3; ++k) {
      q[k] = (e[k] - c.o[k] - c.otc[k] * dt) /
             (c.s[k] * (T(1.0) + c.gtc[k] * dt));
    }
  } else {
    for (int k = 0; k < 3; ++k) q[k] = (e[k] - c.o[k]) * c.inv_s[k];
  }
  T b[3];
  if (layout.misalignment) {
    for (int k = 0; k < 3; ++k) {
      b[k] = c.m[k][0] * q[0] + c.m[k][1] * q[1] + c.m[k][2] * q[2];
    }
  } else {
    b[0] = q[0];
    b[1] = c.m[1][0] * q[0] + c.m[1][1] * q[1];
    b[2] = c.m[2][0] * q[0] + c.m[2][1] * q[1] + c.m[2][2] * q[2];
  }
  for (int k = 0; k < layout.aux_count; ++k) {
    const double a = data.aux[i * layout.aux_count + k];
    const T* g = x + layout.aux(k);
    b[0] -= a * g[0];
    b[1] -= a * g[1];
    b[2] -= a * g[2];
  }
  r[0] = (sqrt(b[0] * b[0] + b[1] * b[1] + b[2] * b[2]) - data.f_ref[i]) *
         w_magnitude;
  if (layout.misalignment) {
    const double* ref = &data.b_ref[3 * i];
    for (int k = 0; k < 3; ++k) r[1 + k] = (b[k] - ref[k]) * w_vector;
  }
}

class ChunkCost : public ceres::CostFunction {
 public:
  ChunkCost(const CalibrationData* data, const ParameterLayout& layout,
            std::size_t begin, std::size_t end, double w_magnitude,
            double w_vector)
      : data_(data),
        layout_(layout),
        begin_(begin),
        end_(end),
        w_magnitude_(w_magnitude),
        w_vector_(w_vector) {
    set_num_residuals(
        static_cast<int>((end - begin) * layout.residuals_per_sample()));
    mutable_parameter_block_sizes()->push_back(layout.size());
  }

  bool Evaluate(double const* const* parameters, double* residuals,
                double** jacobians) const override {
    const double* x = parameters[0];
    if (jacobians == nullptr || jacobians[0] == nullptr) {
      ModelCoefficients<double> c;
      PrepareCoefficients(layout_, x, &c);
      const int rps = layout_.residuals_per_sample();
      for (std::size_t i = begin_; i < end_; ++i) {
        SampleResiduals(layout_, c, x, *data_, i, w_magnitude_, w_vector_,
                        residuals + (i - begin_) * rps);
      }
      return AllFinite(residuals);
    }
    // Jet sizes in steps so that the common 9-parameter fit pays for 9
    // derivatives only; the largest layout is 9 + 3 + 6 + 3 * 6 = 36.
    const int p = layout_.size();
    if (p <= 9) return EvaluateJet<9>(x, residuals, jacobians[0]);
    if (p <= 12) return EvaluateJet<12>(x, residuals, jacobians[0]);
    if (p <= 18) return EvaluateJet<18>(x, residuals, jacobians[0]);
    if (p <= 24) return EvaluateJet<24>(x, residuals, jacobians[0]);
    return EvaluateJet<36>(x, residuals, jacobians[0]);
  }

 private:
  bool AllFinite(const double* residuals) const {
    for (int i = 0; i < num_residuals(); ++i) {
      if (!std::isfinite(residuals[i])) return false;
    }
    return true;
  }

  template <int N>
  bool EvaluateJet(const double* x, double* residuals,
                   double* jacobian) const {
    using J = ceres::Jet<double, N>;
    const int p = layout_.size();
    // Sized for the largest layout (36, see above) whatever N: the
    // compiler cannot see that EvaluateJet<N> only runs when p <= N, and
    // the unused tail stays zero.
    J xj[36];
    for (int i = 0; i < p; ++i) xj[i] = J(x[i], i);
    ModelCoefficients<J> c;
    PrepareCoefficients(layout_, xj, &c);
    const int rps = layout_.residuals_per_sample();
    J r[4];
    for (std::size_t i = begin_; i < end_; ++i) {
      SampleResiduals(layout_, c, xj, *data_, i, w_magnitude_, w_vector_, r);
      const std::size_t row0 = (i - begin_) * rps;
      for (int k = 0; k < rps; ++k) {
        residuals[row0 + k] = r[k].a;
        double* jrow = jacobian + (row0 + k) * p;
        for (int col = 0; col < p; ++col) jrow[col] = r[k].v[col];
      }
    }
    return AllFinite(residuals);
  }

  const CalibrationData* data_;
  const ParameterLayout layout_;
  const std::size_t begin_, end_;
  const double w_magnitude_, w_vector_;
};

// --- Reference field -----------------------------------------------------

// Body-frame components of an NED vector for roll, pitch, heading (rad),
// 3-2-1 sequence: b = Rx(roll)^T Ry(pitch)^T Rz(heading)^T n.
void NedToBody(double roll, double pitch, double heading, const double n[3],
               double b[3]) {
  const double cr = std::cos(roll), sr = std::sin(roll);
  const double cp = std::cos(pitch), sp = std::sin(pitch);
  const double ch = std::cos(heading), sh = std::sin(heading);
  // Rz^T
  const double t0 = ch * n[0] + sh * n[1];
  const double t1 = -sh * n[0] + ch * n[1];
  const double t2 = n[2];
  // Ry^T
  const double u0 = cp * t0 - sp * t2;
  const double u1 = t1;
  const double u2 = sp * t0 + cp * t2;
  // Rx^T
  b[0] = u0;
  b[1] = cr * u1 + sr * u2;
  b[2] = -sr * u1 + cr * u2;
}

// WMM2025 along the track without a spherical-harmonic synthesis per
// sample: the field and its first derivatives are evaluated at nodes and
// extended linearly. A new node is taken beyond 0.05 deg or 1000 m; the
// neglected second-order term there is below 0.01 nT (the main field's
// curvature is of order F / R_earth^2; our estimate).
class TrackField {
 public:
  TrackField(const models::MagneticModel& model, double decimal_year)
      : model_(model), year_(decimal_year) {}

  void At(double lat, double lon, double alt, double ned[3]) {
    if (!has_node_ || std::abs(lat - lat0_) > kMaxDeg ||
        std::abs(WrapDeg(lon - lon0_)) * std::cos(lat0_ * kDeg) > kMaxDeg ||
        std::abs(alt - alt0_) > kMaxAltM) {
      MakeNode(lat, lon, alt);
    }
    const double dlat = lat - lat0_, dlon = WrapDeg(lon - lon0_);
    const double dalt = alt - alt0_;
    for (int k = 0; k < 3; ++k) {
      ned[k] = b0_[k] + dlat * dlat_[k] + dlon * dlon_[k] + dalt * dalt_[k];
    }
  }
  int nodes() const { return nodes_; }

 private:
  static constexpr double kMaxDeg = 0.05;
  static constexpr double kMaxAltM = 1000.0;
  static constexpr double kStepDeg = 0.01;
  static constexpr double kStepM = 100.0;

  static double WrapDeg(double d) {
    while (d > 180.0) d -= 360.0;
    while (d < -180.0) d += 360.0;
    return d;
  }
  void Eval(double lat, double lon, double alt, double out[3]) const {
    const models::GeomagneticField g = model_.Field(lat, lon, alt, year_);
    out[0] = g.x_nT;
    out[1] = g.y_nT;
    out[2] = g.z_nT;
  }
  void MakeNode(double lat, double lon, double alt) {
    lat0_ = lat;
    lon0_ = lon;
    alt0_ = alt;
    Eval(lat, lon, alt, b0_);
    // Central differences; the latitude step turns back at the poles.
    double p[3], m[3];
    const double hl = std::abs(lat) + kStepDeg > 90.0 ? -kStepDeg : kStepDeg;
    Eval(lat + hl, lon, alt, p);
    for (int k = 0; k < 3; ++k) dlat_[k] = (p[k] - b0_[k]) / hl;
    Eval(lat, lon + kStepDeg, alt, p);
    Eval(lat, lon - kStepDeg, alt, m);
    for (int k = 0; k < 3; ++k) dlon_[k] = (p[k] - m[k]) / (2 * kStepDeg);
    Eval(lat, lon, alt + kStepM, p);
    Eval(lat, lon, alt - kStepM, m);
    for (int k = 0; k < 3; ++k) dalt_[k] = (p[k] - m[k]) / (2 * kStepM);
    has_node_ = true;
    ++nodes_;
  }

  const models::MagneticModel& model_;
  const double year_;
  bool has_node_ = false;
  int nodes_ = 0;
  double lat0_ = 0, lon0_ = 0, alt0_ = 0;
  double b0_[3] = {0, 0, 0}, dlat_[3] = {0, 0, 0}, dlon_[3] = {0, 0, 0},
         dalt_[3] = {0, 0, 0};
};

// --- Initial guess -------------------------------------------------------

// Algebraic ellipsoid fit: the quadric E^T A E + b^T E + c = 0 fitted up to
// scale (smallest eigenvector of the 10x10 scatter matrix of the rows
// [quadratic terms, E, 1]; the quadric of the scalar calibration, Merayo et
// al. 2000). Then o = -A^-1 b / 2, (E - o)^T A (E - o) = o^T A o - c = g,
// so A / g maps the ellipsoid to the unit sphere (in units of the mean
// reference field), and A^-1 = L L^T with L = S P lower triangular
// (Cholesky): s_i = |row i of L|, P = S^-1 L. Returns false when there is
// no ellipsoid (poor coverage): the caller starts from unit gains and zero
// offsets.
bool EllipsoidGuess(const CalibrationData& data, double* x) {
  double f_mean = 0;
  for (std::size_t i = 0; i < data.n; ++i) f_mean += data.f_ref[i];
  f_mean /= static_cast<double>(data.n);
  if (!(f_mean > 0)) return false;
  const double k = 1.0 / f_mean;  // work in units of the mean field
  Eigen::Matrix<double, 10, 10> ata = Eigen::Matrix<double, 10, 10>::Zero();
  Eigen::Matrix<double, 10, 1> row;
  for (std::size_t i = 0; i < data.n; ++i) {
    const double ex = data.raw[3 * i] * k, ey = data.raw[3 * i + 1] * k,
                 ez = data.raw[3 * i + 2] * k;
    row << ex * ex, 2 * ex * ey, 2 * ex * ez, ey * ey, 2 * ey * ez, ez * ez,
        ex, ey, ez, 1.0;
    ata.selfadjointView<Eigen::Lower>().rankUpdate(row);
  }
  ata = ata.selfadjointView<Eigen::Lower>();
  Eigen::SelfAdjointEigenSolver<Eigen::Matrix<double, 10, 10>> quadric(ata);
  if (quadric.info() != Eigen::Success) return false;
  Eigen::Matrix<double, 10, 1> sol = quadric.eigenvectors().col(0);
  if (!sol.allFinite()) return false;
  if (sol(0) + sol(3) + sol(5) < 0) sol = -sol;  // trace(A) > 0
  Eigen::Matrix3d a;
  a << sol(0), sol(1), sol(2), sol(1), sol(3), sol(4), sol(2), sol(4), sol(5);
  const Eigen::Vector3d bv(sol(6), sol(7), sol(8));
  Eigen::SelfAdjointEigenSolver<Eigen::Matrix3d> eig(a);
  if (eig.info() != Eigen::Success || !(eig.eigenvalues()(0) > 0)) {
    return false;
  }
  const Eigen::Vector3d o = -0.5 * a.inverse() * bv;
  const double g = o.dot(a * o) - sol(9);
  if (!(g > 0)) return false;
  a /= g;
  const Eigen::LLT<Eigen::Matrix3d> llt(a.inverse());
  if (llt.info() != Eigen::Success) return false;
  const Eigen::Matrix3d l = llt.matrixL();
  double s[3], p[3][3];
  for (int i = 0; i < 3; ++i) {
    s[i] = l.row(i).norm();
    for (int j = 0; j < 3; ++j) p[i][j] = l(i, j) / s[i];
  }
  const double u1 = std::asin(p[1][0]);
  const double u2 = std::asin(p[2][0]);
  const double su3 = p[2][1] / std::cos(u2);
  if (!(std::abs(su3) < 1.0)) return false;
  const double u3 = std::asin(su3);
  for (int i = 0; i < 3; ++i) {
    x[i] = s[i];  // units cancel: A was fitted in units of the mean field
    x[3 + i] = o(i) / k;
  }
  x[6] = u1;
  x[7] = u2;
  x[8] = u3;
  for (int i = 0; i < 9; ++i) {
    if (!std::isfinite(x[i])) return false;
  }
  return true;
}

// --- Solving --------------------------------------------------------------

struct SolveResult {
  bool converged = false;
  int iterations = 0;
  std::string message;
  double rms_magnitude = kNaN;   // nT, unweighted
  double rms_vector = kNaN;      // nT, unweighted, per component
  double chi2 = 0;               // weighted sum of squares
  std::size_t residuals = 0;
  Eigen::MatrixXd jtj;           // weighted J^T J at the solution
  Eigen::MatrixXd covariance;    // of x, scaled by chi2 / (m - p)
  bool covariance_from_ceres = false;
  double condition_number = kNaN;  // of the column-scaled J^T J
};

// r = U (x - x0): the square-root information form of a least-squares
// problem whose J^T J is U^T U (for ceres::Covariance).
class SqrtInformationCost : public ceres::CostFunction {
 public:
  SqrtInformationCost(const Eigen::MatrixXd& u, const std::vector<double>& x0)
      : u_(u), x0_(x0) {
    set_num_residuals(static_cast<int>(u.rows()));
    mutable_parameter_block_sizes()->push_back(static_cast<int>(u.cols()));
  }
  bool Evaluate(double const* const* parameters, double* residuals,
                double** jacobians) const override {
    const int p = static_cast<int>(u_.cols());
    Eigen::VectorXd dx(p);
    for (int i = 0; i < p; ++i) dx(i) = parameters[0][i] - x0_[i];
    Eigen::Map<Eigen::VectorXd>(residuals, p) = u_ * dx;
    if (jacobians != nullptr && jacobians[0] != nullptr) {
      Eigen::Map<Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic,
                                Eigen::RowMajor>>(jacobians[0], p, p) = u_;
    }
    return true;
  }

 private:
  const Eigen::MatrixXd u_;
  const std::vector<double> x0_;
};

// Residual RMS of the two classes, unweighted (nT).
void ResidualRms(const CalibrationData& data, const ParameterLayout& layout,
                 const std::vector<double>& x, double* rms_m,
                 double* rms_v) {
  ModelCoefficients<double> c;
  PrepareCoefficients(layout, x.data(), &c);
  double sm = 0, sv = 0;
  double r[4];
  for (std::size_t i = 0; i < data.n; ++i) {
    SampleResiduals(layout, c, x.data(), data, i, 1.0, 1.0, r);
    sm += r[0] * r[0];
    if (layout.misalignment) sv += r[1] * r[1] + r[2] * r[2] + r[3] * r[3];
  }
  *rms_m = std::sqrt(sm / static_cast<double>(data.n));
  *rms_v = layout.misalignment
               ? std::sqrt(sv / (3.0 * static_cast<double>(data.n)))
               : kNaN;
}

SolveResult Solve(const CalibrationData& data, const ParameterLayout& layout,
                  double w_magnitude, double w_vector,
                  const CalibrateOptions& options, std::vector<double>* x) {
  SolveResult out;
  ceres::Problem problem;
  std::vector<const ChunkCost*> costs;
  for (std::size_t begin = 0; begin < data.n; begin += kChunkSamples) {
    const std::size_t end = std::min(data.n, begin + kChunkSamples);
    auto* cost =
        new ChunkCost(&data, layout, begin, end, w_magnitude, w_vector);
    costs.push_back(cost);
    problem.AddResidualBlock(cost, nullptr, x->data());
  }
  ceres::Solver::Options so;
  so.minimizer_type = ceres::TRUST_REGION;
  so.trust_region_strategy_type = ceres::LEVENBERG_MARQUARDT;
  // Few parameters, many residuals: the normal equations are tiny; Ceres
  // scales the columns (jacobi_scaling) so gains (|dr/ds| ~ 5e4 nT) and
  // offsets (~1) are on a par.
  so.linear_solver_type = ceres::DENSE_NORMAL_CHOLESKY;
  so.num_threads = options.num_threads;
  so.max_num_iterations = options.max_iterations;
  so.function_tolerance = 1e-12;
  so.parameter_tolerance = 1e-12;
  so.gradient_tolerance = 1e-14;
  so.logging_type = ceres::SILENT;
  so.minimizer_progress_to_stdout = false;
  ceres::Solver::Summary summary;
  ceres::Solve(so, &problem, &summary);
  out.iterations = static_cast<int>(summary.iterations.size());
  out.message = summary.message;
  out.converged = summary.IsSolutionUsable() &&
                  summary.termination_type == ceres::CONVERGENCE;
  ResidualRms(data, layout, *x, &out.rms_magnitude, &out.rms_vector);

  // Weighted J^T J, accumulated chunk by chunk from the same cost
  // functions that Ceres used.
  const int p = layout.size();
  out.jtj = Eigen::MatrixXd::Zero(p, p);
  out.chi2 = 0;
  std::vector<double> res, jac;
  for (const ChunkCost* cost : costs) {
    const int m = cost->num_residuals();
    res.resize(m);
    jac.resize(static_cast<std::size_t>(m) * p);
    const double* params[1] = {x->data()};
    double* jacs[1] = {jac.data()};
    if (!cost->Evaluate(params, res.data(), jacs)) {
      out.converged = false;
      out.message += "; non-finite residuals at the solution";
      return out;
    }
    Eigen::Map<const Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic,
                                   Eigen::RowMajor>>
        jm(jac.data(), m, p);
    out.jtj.selfadjointView<Eigen::Lower>().rankUpdate(jm.transpose());
    for (double r : res) out.chi2 += r * r;
    out.residuals += static_cast<std::size_t>(m);
  }
  out.jtj = out.jtj.selfadjointView<Eigen::Lower>();

  // Conditioning after scaling every column to unit norm.
  Eigen::VectorXd d = out.jtj.diagonal();
  for (int i = 0; i < p; ++i) d(i) = d(i) > 0 ? 1.0 / std::sqrt(d(i)) : 0.0;
  const Eigen::MatrixXd scaled = d.asDiagonal() * out.jtj * d.asDiagonal();
  Eigen::SelfAdjointEigenSolver<Eigen::MatrixXd> eig(scaled);
  const Eigen::VectorXd lambda = eig.eigenvalues();
  const double lmax = lambda(p - 1);
  const double lmin = lambda(0);
  out.condition_number = lmin > 0 ? lmax / lmin
                                  : std::numeric_limits<double>::infinity();

  const double dof =
      static_cast<double>(out.residuals) - static_cast<double>(p);
  const double variance = dof > 0 ? out.chi2 / dof : kNaN;

  // ceres::Covariance only where J^T J is clearly of full rank (it refuses
  // rank-deficient Jacobians; we then use a clamped pseudo-inverse so that
  // the undetermined parameters show huge standard errors). It runs on the
  // square-root information form r = U (x - x_hat), U^T U = J^T J, which
  // has the same covariance (J^T J)^-1 as the full problem but p rather
  // than millions of rows (on the full 1e6 x 9 Jacobian ceres::Covariance
  // took 5-10 times as long as the whole fit).
  constexpr double kMaxConditionForCeres = 1e12;
  if (out.condition_number < kMaxConditionForCeres) {
    const Eigen::LLT<Eigen::MatrixXd> llt(out.jtj);
    if (llt.info() == Eigen::Success) {
      const Eigen::MatrixXd u = llt.matrixU();
      std::vector<double> xc = *x;
      ceres::Problem compact;
      compact.AddResidualBlock(new SqrtInformationCost(u, *x), nullptr,
                               xc.data());
      ceres::Covariance::Options co;
      co.algorithm_type = ceres::DENSE_SVD;
      ceres::Covariance covariance(co);
      const std::vector<std::pair<const double*, const double*>> blocks = {
          {xc.data(), xc.data()}};
      Eigen::Matrix<double, Eigen::Dynamic, Eigen::Dynamic, Eigen::RowMajor>
          c(p, p);
      if (covariance.Compute(blocks, &compact) &&
          covariance.GetCovarianceBlock(xc.data(), xc.data(), c.data())) {
        out.covariance = c * variance;
        out.covariance_from_ceres = true;
      }
    }
  }
  if (!out.covariance_from_ceres) {
    constexpr double kClamp = 1e-16;  // relative to the largest eigenvalue
    Eigen::VectorXd inv(p);
    for (int i = 0; i < p; ++i) {
      inv(i) = 1.0 / std::max(lambda(i), lmax * kClamp);
    }
    const Eigen::MatrixXd v = eig.eigenvectors();
    out.covariance = d.asDiagonal() * v * inv.asDiagonal() * v.transpose() *
                     d.asDiagonal() * variance;
  }
  return out;
}

// Wahba's problem (Kabsch/SVD solution): the rotation Q minimising
// sum |Q w_i - r_i|^2 is U diag(1, 1, det(U V^T)) V^T for
// sum r_i w_i^T = U S V^T.
Eigen::Matrix3d WahbaRotation(const std::vector<double>& w,
                              const std::vector<double>& ref,
                              std::size_t n) {
  Eigen::Matrix3d h = Eigen::Matrix3d::Zero();
  for (std::size_t i = 0; i < n; ++i) {
    const Eigen::Vector3d wi(w[3 * i], w[3 * i + 1], w[3 * i + 2]);
    const Eigen::Vector3d ri(ref[3 * i], ref[3 * i + 1], ref[3 * i + 2]);
    h += ri * wi.transpose();
  }
  Eigen::JacobiSVD<Eigen::Matrix3d> svd(h, Eigen::ComputeFullU |
                                               Eigen::ComputeFullV);
  Eigen::Matrix3d fix = Eigen::Matrix3d::Identity();
  fix(2, 2) = (svd.matrixU() * svd.matrixV().transpose()).determinant() < 0
                  ? -1.0
                  : 1.0;
  return svd.matrixU() * fix * svd.matrixV().transpose();
}

// Angles of R = Rx(ax) Ry(ay) Rz(az) (see PrepareCoefficients).
void RotationAngles(const Eigen::Matrix3d& r, double a[3]) {
  a[1] = std::asin(std::clamp(r(0, 2), -1.0, 1.0));
  a[2] = std::atan2(-r(0, 1), r(0, 0));
  a[0] = std::atan2(-r(1, 2), r(2, 2));
}

// --- Summary helpers ------------------------------------------------------

void SetVec(proto::Vector3* v, double x, double y, double z) {
  v->set_x(x);
  v->set_y(y);
  v->set_z(z);
}
void SetVec(proto::Vector3* v, const double* a, double scale = 1.0) {
  SetVec(v, a[0] * scale, a[1] * scale, a[2] * scale);
}

const char* const kAxis[3] = {"x", "y", "z"};

struct ParameterInfo {
  std::string name;
  double value;
  double std_error;
  double effect_per_unit;  // nT per unit of the parameter
  int axis_mask;           // bit k: involves sensor axis k
  enum Kind { kSensor, kMisalign, kTemperature, kAux } kind;
  std::string channel;     // aux channel
};

std::string Fmt(const char* format, double v) {
  char buf[64];
  std::snprintf(buf, sizeof buf, format, v);
  return buf;
}

std::string JoinNames(const std::vector<std::string>& names) {
  std::string s;
  for (std::size_t i = 0; i < names.size(); ++i) {
    if (i) s += ", ";
    s += names[i];
  }
  return s;
}

// What to fly so that the undetermined parameters become determined.
std::string WhatToFly(const proto::DirectionCoverage& coverage,
                      const std::vector<ParameterInfo>& undetermined) {
  int axes = 0;
  bool misalign = false, temperature = false;
  std::vector<std::string> aux;
  for (const ParameterInfo& p : undetermined) {
    axes |= p.axis_mask;
    misalign |= p.kind == ParameterInfo::kMisalign;
    temperature |= p.kind == ParameterInfo::kTemperature;
    if (p.kind == ParameterInfo::kAux &&
        std::find(aux.begin(), aux.end(), p.channel) == aux.end()) {
      aux.push_back(p.channel);
    }
  }
  const proto::Vector3& least = coverage.least_explored_axis();
  const bool z_least = std::abs(least.z()) >= std::abs(least.x()) &&
                       std::abs(least.z()) >= std::abs(least.y());
  std::vector<std::string> todo;
  const bool one_direction =
      coverage.eigenvalues_size() == 3 && coverage.eigenvalues(0) > 0.97;
  if (one_direction || (axes & 3) || (!z_least && (axes & 4))) {
    todo.push_back(
        "turn through every heading (a full 360-degree turn, or a box of "
        "four headings) so that the horizontal field sweeps the x and y "
        "axes");
  }
  if (one_direction || (axes & 4) || (z_least && (axes & 3))) {
    todo.push_back(
        "tilt: pitch and roll as far as the platform safely allows "
        "(+-30 degrees or more) on each of at least four headings, so that "
        "the field's component along the sensor's z axis changes");
  }
  if (misalign) {
    todo.push_back(
        "record roll, pitch and heading through those turns and tilts "
        "(the misalignment needs the attitude and the field direction)");
  }
  if (temperature) {
    todo.push_back(
        "record over a wider temperature range (start cold and let the "
        "sensor warm up), or calibrate without --temperature");
  }
  if (!aux.empty()) {
    todo.push_back("vary the current of " + JoinNames(aux) +
                   " (e.g. throttle changes) on several headings, or leave "
                   "it out of --aux");
  }
  if (axes) {
    todo.push_back(
        "on the ground, rotating the sensor by hand through every "
        "orientation (away from steel and vehicles) covers the whole "
        "sphere of directions");
  }
  std::string s;
  for (std::size_t i = 0; i < todo.size(); ++i) {
    s += (i ? "; " : "") + todo[i];
  }
  return s;
}

double Rms(const std::vector<double>& v) {
  double s = 0;
  for (double x : v) s += x * x;
  return v.empty() ? kNaN : std::sqrt(s / static_cast<double>(v.size()));
}

}  // namespace

// --- Public functions ------------------------------------------------------

bool CalibrateOptions::IsValid(std::string* error) const {
  auto fail = [error](const std::string& m) {
    if (error) *error = m;
    return false;
  };
  if (!(max_std_error_nT > 0)) {
    return fail("max_std_error_nT must be positive");
  }
  if (static_cast<int>(aux_channels.size()) > kMaxAuxChannels) {
    return fail("at most " + std::to_string(kMaxAuxChannels) +
                " aux channels");
  }
  if (max_iterations < 1) return fail("max_iterations must be at least 1");
  if (num_threads < 1) return fail("num_threads must be at least 1");
  if (min_samples < 20) return fail("min_samples must be at least 20");
  if (!std::isnan(decimal_year) && !std::isfinite(decimal_year)) {
    return fail("decimal_year must be finite or NaN");
  }
  return true;
}

std::unique_ptr<ceres::CostFunction> MakeChunkCost(
    const CalibrationData* data, const ParameterLayout& layout,
    std::size_t begin, std::size_t end, double w_magnitude,
    double w_vector) {
  return std::make_unique<ChunkCost>(data, layout, begin, end, w_magnitude,
                                     w_vector);
}

std::string SensorModelConvention() {
  return "E = S P R B + o (form of Merayo et al. 2000, Meas. Sci. Technol. "
         "11:120, as recalled from memory)\n"
         "  B  true field in body axes (x forward, y starboard, z down), nT\n"
         "  R  misalignment Rx(a_x) Ry(a_y) Rz(a_z)\n"
         "  P  non-orthogonality u1, u2, u3: lower triangular with rows\n"
         "       [1, 0, 0]\n"
         "       [sin u1, cos u1, 0]\n"
         "       [sin u2, sin u3 cos u2, cos u2 cos u3]\n"
         "  S  diag(gains), o offsets (nT), E raw reading (nT)\n"
         "  calibrated field B = R^T P^-1 S^-1 (E - o)\n";
}

proto::DirectionCoverage ComputeDirectionCoverage(std::size_t n,
                                                  const double* x,
                                                  const double* y,
                                                  const double* z) {
  std::vector<char> hit(kCoverageBands * kCoverageSectors, 0);
  Eigen::Matrix3d scatter = Eigen::Matrix3d::Zero();
  std::size_t used = 0;
  for (std::size_t i = 0; i < n; ++i) {
    const double norm = std::sqrt(x[i] * x[i] + y[i] * y[i] + z[i] * z[i]);
    if (!(norm > 0) || !std::isfinite(norm)) continue;
    const Eigen::Vector3d u(x[i] / norm, y[i] / norm, z[i] / norm);
    scatter += u * u.transpose();
    int band = static_cast<int>((u.z() + 1.0) * 0.5 * kCoverageBands);
    band = std::clamp(band, 0, kCoverageBands - 1);
    int sector = static_cast<int>((std::atan2(u.y(), u.x()) + kPi) /
                                  (2 * kPi) * kCoverageSectors);
    sector = std::clamp(sector, 0, kCoverageSectors - 1);
    hit[band * kCoverageSectors + sector] = 1;
    ++used;
  }
  proto::DirectionCoverage cov;
  cov.set_cells(kCoverageBands * kCoverageSectors);
  unsigned hits = 0;
  for (char h : hit) hits += h ? 1 : 0;
  cov.set_cells_hit(hits);
  cov.set_fraction(static_cast<double>(hits) / cov.cells());
  if (used > 0) {
    scatter /= static_cast<double>(used);
    Eigen::SelfAdjointEigenSolver<Eigen::Matrix3d> eig(scatter);
    for (int i = 2; i >= 0; --i) cov.add_eigenvalues(eig.eigenvalues()(i));
    const Eigen::Vector3d v = eig.eigenvectors().col(0);
    SetVec(cov.mutable_least_explored_axis(), v.x(), v.y(), v.z());
  }
  return cov;
}

models::SensorCalibration FromProto(const proto::SensorCalibration& cal) {
  models::SensorCalibration m;
  const proto::Vector3* vecs[6] = {&cal.gains(),
                                   &cal.offsets_nt(),
                                   &cal.nonorthogonality_deg(),
                                   &cal.misalignment_deg(),
                                   &cal.gain_tc_per_k(),
                                   &cal.offset_tc_nt_per_k()};
  double* dst[6] = {m.gains,           m.offsets_nT,    m.nonorthogonality_rad,
                    m.misalignment_rad, m.gain_tc_per_K, m.offset_tc_nT_per_K};
  const double scale[6] = {1, 1, kDeg, kDeg, 1, 1};
  for (int k = 0; k < 6; ++k) {
    dst[k][0] = vecs[k]->x() * scale[k];
    dst[k][1] = vecs[k]->y() * scale[k];
    dst[k][2] = vecs[k]->z() * scale[k];
  }
  if (!cal.has_misalignment()) {
    m.misalignment_rad[0] = m.misalignment_rad[1] = m.misalignment_rad[2] = 0;
  }
  m.reference_temp_c = cal.reference_temp_c();
  return m;
}

void ToProto(const models::SensorCalibration& cal, bool has_misalignment,
             proto::SensorCalibration* out) {
  SetVec(out->mutable_gains(), cal.gains);
  SetVec(out->mutable_offsets_nt(), cal.offsets_nT);
  SetVec(out->mutable_nonorthogonality_deg(), cal.nonorthogonality_rad,
         1.0 / kDeg);
  out->set_has_misalignment(has_misalignment);
  if (has_misalignment) {
    SetVec(out->mutable_misalignment_deg(), cal.misalignment_rad, 1.0 / kDeg);
  } else {
    out->clear_misalignment_deg();
  }
  SetVec(out->mutable_gain_tc_per_k(), cal.gain_tc_per_K);
  SetVec(out->mutable_offset_tc_nt_per_k(), cal.offset_tc_nT_per_K);
  out->set_reference_temp_c(cal.reference_temp_c);
}

void ApplySensorCalibration(const proto::SensorCalibration& cal,
                            io::Table* table,
                            const ApplySensorOptions& options) {
  const models::SensorCalibration m = FromProto(cal);
  for (const char* name : {"bx", "by", "bz"}) {
    if (!table->Has(name)) {
      throw std::invalid_argument(std::string("channel '") + name +
                                  "' is needed to apply the sensor "
                                  "calibration");
    }
  }
  const std::vector<double>* temp = nullptr;
  if (!cal.temperature_channel().empty()) {
    if (!table->Has(cal.temperature_channel())) {
      throw std::invalid_argument(
          "the sensor calibration has temperature coefficients for channel '" +
          cal.temperature_channel() + "', which the recording does not have");
    }
    temp = &table->Column(cal.temperature_channel());
  }
  std::vector<const std::vector<double>*> aux;
  if (options.subtract_aux) {
    for (const proto::AuxCoupling& a : cal.aux()) {
      if (!table->Has(a.channel())) {
        throw std::invalid_argument(
            "the sensor calibration has a coupling for channel '" +
            a.channel() + "', which the recording does not have");
      }
      aux.push_back(&table->Column(a.channel()));
    }
  }
  std::vector<double>& bx = table->Column("bx");
  std::vector<double>& by = table->Column("by");
  std::vector<double>& bz = table->Column("bz");
  for (std::size_t i = 0; i < bx.size(); ++i) {
    const double t = temp ? (*temp)[i] : m.reference_temp_c;
    models::Vec3 b = models::SensorCorrect(m, {bx[i], by[i], bz[i]}, t);
    for (std::size_t k = 0; k < aux.size(); ++k) {
      const double a = (*aux[k])[i];
      const proto::Vector3& g = cal.aux(static_cast<int>(k))
                                    .coupling_nt_per_unit();
      b.x -= a * g.x();
      b.y -= a * g.y();
      b.z -= a * g.z();
    }
    if (!std::isfinite(t)) b = {kNaN, kNaN, kNaN};
    bx[i] = b.x;
    by[i] = b.y;
    bz[i] = b.z;
  }
}

CalibrateResult Calibrate(const io::Table& table,
                          const CalibrateOptions& options) {
  const auto start = std::chrono::steady_clock::now();
  std::string error;
  if (!options.IsValid(&error)) throw std::invalid_argument(error);
  auto require = [&table](const std::string& name, const std::string& why) {
    if (!table.Has(name)) {
      throw std::invalid_argument("channel '" + name + "' is needed " + why);
    }
  };
  for (const char* c : {"bx", "by", "bz"}) require(c, "(raw fluxgate, nT)");

  CalibrateResult result;
  proto::CalibrationSummary& s = result.summary;
  s.set_file(options.source);
  s.set_model(SensorModelConvention());
  s.set_samples(static_cast<std::uint32_t>(table.rows()));

  const bool has_attitude =
      table.Has("roll") && table.Has("pitch") && table.Has("heading");
  const bool has_position =
      table.Has("lat") && table.Has("lon") && table.Has("alt");
  const bool has_date = std::isfinite(options.decimal_year);
  const bool has_f = options.use_scalar_sensor && table.Has("f");

  bool vector = false;
  switch (options.mode) {
    case CalibrateOptions::Mode::kScalar:
      break;
    case CalibrateOptions::Mode::kVector:
      for (const char* c : {"roll", "pitch", "heading"}) {
        require(c, "for a vector (attitude-aided) calibration (deg)");
      }
      for (const char* c : {"lat", "lon", "alt"}) {
        require(c, "for a vector calibration (WMM2025 direction)");
      }
      if (!has_date) {
        throw std::invalid_argument(
            "a vector calibration needs the date of the recording (WMM2025)");
      }
      vector = true;
      break;
    case CalibrateOptions::Mode::kAuto:
      vector = has_attitude && has_position && has_date;
      if (has_attitude && !vector) {
        s.add_warnings(
            "roll, pitch and heading are present but " +
            std::string(has_position ? "no date was given"
                                     : "lat, lon or alt is missing") +
            ": magnitude-only calibration, the misalignment is not "
            "determined");
      }
      break;
  }
  const bool need_wmm = vector || !has_f;
  if (need_wmm) {
    for (const char* c : {"lat", "lon", "alt"}) {
      require(c, "for the WMM2025 reference (no scalar sensor 'f')");
    }
    if (!has_date) {
      throw std::invalid_argument(
          "without a scalar sensor channel 'f' the reference is the WMM2025 "
          "magnitude, which needs the date of the recording");
    }
  }
  if (!options.temperature_channel.empty()) {
    require(options.temperature_channel, "(--temperature)");
  }
  for (const std::string& a : options.aux_channels) require(a, "(--aux)");

  ParameterLayout layout;
  layout.temperature = !options.temperature_channel.empty();
  layout.aux_count = static_cast<int>(options.aux_channels.size());
  s.set_mode(vector ? "vector" : "scalar");
  s.set_reference(has_f ? (vector ? "scalar sensor magnitude, WMM2025 "
                                    "direction"
                                  : "scalar sensor")
                        : (vector ? "WMM2025 vector" : "WMM2025 magnitude"));

  // Gather the usable rows.
  const std::size_t rows = table.rows();
  const auto& bx = table.Column("bx");
  const auto& by = table.Column("by");
  const auto& bz = table.Column("bz");
  const std::vector<double>* f = has_f ? &table.Column("f") : nullptr;
  const std::vector<double>* lat = need_wmm ? &table.Column("lat") : nullptr;
  const std::vector<double>* lon = need_wmm ? &table.Column("lon") : nullptr;
  const std::vector<double>* alt = need_wmm ? &table.Column("alt") : nullptr;
  const std::vector<double>* roll = vector ? &table.Column("roll") : nullptr;
  const std::vector<double>* pitch = vector ? &table.Column("pitch") : nullptr;
  const std::vector<double>* heading =
      vector ? &table.Column("heading") : nullptr;
  const std::vector<double>* temp =
      layout.temperature ? &table.Column(options.temperature_channel)
                         : nullptr;
  std::vector<const std::vector<double>*> aux;
  for (const std::string& a : options.aux_channels) {
    aux.push_back(&table.Column(a));
  }
  std::vector<std::size_t> used;
  used.reserve(rows);
  for (std::size_t i = 0; i < rows; ++i) {
    bool ok = std::isfinite(bx[i]) && std::isfinite(by[i]) &&
              std::isfinite(bz[i]);
    if (f) ok = ok && std::isfinite((*f)[i]) && (*f)[i] > 0;
    if (lat) {
      ok = ok && std::isfinite((*lat)[i]) && std::isfinite((*lon)[i]) &&
           std::isfinite((*alt)[i]) && std::abs((*lat)[i]) <= 90.0;
    }
    if (roll) {
      ok = ok && std::isfinite((*roll)[i]) && std::isfinite((*pitch)[i]) &&
           std::isfinite((*heading)[i]);
    }
    if (temp) ok = ok && std::isfinite((*temp)[i]);
    for (const auto* a : aux) ok = ok && std::isfinite((*a)[i]);
    if (ok) used.push_back(i);
  }
  s.set_samples_used(static_cast<std::uint32_t>(used.size()));
  if (used.size() < options.min_samples) {
    s.set_accepted(false);
    s.set_refusal("only " + std::to_string(used.size()) +
                  " samples have every channel the calibration needs (at "
                  "least " + std::to_string(options.min_samples) +
                  " are required)");
    return result;
  }

  CalibrationData data;
  data.n = used.size();
  data.raw.resize(3 * data.n);
  data.f_ref.resize(data.n);
  if (vector) data.b_ref.resize(3 * data.n);
  if (layout.temperature) data.dtemp_k.resize(data.n);
  if (layout.aux_count) data.aux.resize(data.n * layout.aux_count);

  double reference_temp_c = 20.0, tmin = 0, tmax = 0;
  if (temp) {
    double sum = 0;
    tmin = tmax = (*temp)[used[0]];
    for (std::size_t i : used) {
      sum += (*temp)[i];
      tmin = std::min(tmin, (*temp)[i]);
      tmax = std::max(tmax, (*temp)[i]);
    }
    reference_temp_c = sum / static_cast<double>(used.size());
  }
  std::vector<double> aux_max(layout.aux_count, 0.0);

  std::unique_ptr<TrackField> track;
  if (need_wmm) {
    track = std::make_unique<TrackField>(models::MagneticModel::Wmm2025(),
                                         options.decimal_year);
    proto::WmmReference* w = s.mutable_wmm();
    w->set_decimal_year(options.decimal_year);
    const models::GeomagneticField g0 = models::MagneticModel::Wmm2025().Field(
        (*lat)[used[0]], (*lon)[used[0]], (*alt)[used[0]],
        options.decimal_year);
    w->set_inclination_deg(g0.incl_deg);
    w->set_declination_deg(g0.decl_deg);
    if (!models::MagneticModel::Wmm2025().IsValidDate(options.decimal_year)) {
      s.add_warnings("the date " + Fmt("%.3f", options.decimal_year) +
                     " is outside the validity of WMM2025 (2025.0-2030.0)");
    }
  }
  double wmm_min = std::numeric_limits<double>::infinity();
  double wmm_max = -wmm_min;
  for (std::size_t j = 0; j < data.n; ++j) {
    const std::size_t i = used[j];
    data.raw[3 * j] = bx[i];
    data.raw[3 * j + 1] = by[i];
    data.raw[3 * j + 2] = bz[i];
    double ned[3] = {0, 0, 0}, wmm_f = kNaN;
    if (track) {
      track->At((*lat)[i], (*lon)[i], (*alt)[i], ned);
      wmm_f = std::sqrt(ned[0] * ned[0] + ned[1] * ned[1] + ned[2] * ned[2]);
      wmm_min = std::min(wmm_min, wmm_f);
      wmm_max = std::max(wmm_max, wmm_f);
    }
    data.f_ref[j] = f ? (*f)[i] : wmm_f;
    if (vector) {
      double body[3];
      NedToBody((*roll)[i] * kDeg, (*pitch)[i] * kDeg, (*heading)[i] * kDeg,
                ned, body);
      // Direction from WMM2025, magnitude from the reference (the scalar
      // sensor when there is one).
      const double scale = data.f_ref[j] / wmm_f;
      for (int k = 0; k < 3; ++k) data.b_ref[3 * j + k] = body[k] * scale;
    }
    if (temp) data.dtemp_k[j] = (*temp)[i] - reference_temp_c;
    for (int k = 0; k < layout.aux_count; ++k) {
      const double a = (*aux[k])[i];
      data.aux[j * layout.aux_count + k] = a;
      aux_max[k] = std::max(aux_max[k], std::abs(a));
    }
  }
  double f_mean = 0;
  for (double v : data.f_ref) f_mean += v;
  f_mean /= static_cast<double>(data.n);
  if (track) {
    proto::WmmReference* w = s.mutable_wmm();
    w->set_f_min_nt(wmm_min);
    w->set_f_max_nt(wmm_max);
    w->set_f_range_nt(wmm_max - wmm_min);
    if (!has_f) {
      s.add_warnings(
          "reference is the WMM2025 main field: local crustal anomalies and "
          "external (diurnal) fields are not in it and bias the gains (a "
          "uniform reference error dF scales every gain by about dF/F = " +
          Fmt("%.1e", 1.0 / f_mean) + " per nT); WMM2025 varied by " +
          Fmt("%.2f", wmm_max - wmm_min) + " nT along the recording");
    }
  }

  // Residuals before: the raw reading taken as the field.
  {
    std::vector<double> rm(data.n), rv;
    if (vector) rv.resize(3 * data.n);
    for (std::size_t j = 0; j < data.n; ++j) {
      const double* e = &data.raw[3 * j];
      rm[j] = std::sqrt(e[0] * e[0] + e[1] * e[1] + e[2] * e[2]) -
              data.f_ref[j];
      for (std::size_t k = 0; k < rv.size() / data.n; ++k) {
        rv[3 * j + k] = e[k] - data.b_ref[3 * j + k];
      }
    }
    s.set_residual_rms_before_nt(Rms(rm));
    if (vector) s.set_vector_residual_rms_before_nt(Rms(rv));
  }

  // Stage 1: magnitude fit from the algebraic ellipsoid (or unit gains).
  ParameterLayout scalar_layout = layout;
  scalar_layout.misalignment = false;
  std::vector<double> x(scalar_layout.size(), 0.0);
  if (!EllipsoidGuess(data, x.data())) {
    for (int i = 0; i < 9; ++i) x[i] = i < 3 ? 1.0 : 0.0;
    s.add_warnings(
        "the algebraic ellipsoid fit gave no ellipsoid (poor coverage); "
        "started from unit gains and zero offsets");
  }
  SolveResult fit = Solve(data, scalar_layout, 1.0, 1.0, options, &x);
  int iterations = fit.iterations;
  double w_m = 1.0, w_v = 1.0;

  if (vector && fit.converged) {
    // Stage 2: the rotation from Wahba's problem, then the joint fit.
    layout.misalignment = true;
    std::vector<double> w(3 * data.n);
    {
      ModelCoefficients<double> c;
      PrepareCoefficients(scalar_layout, x.data(), &c);
      ParameterLayout probe = scalar_layout;
      // b in sensor axes: the magnitude residual's vector, recomputed.
      for (std::size_t j = 0; j < data.n; ++j) {
        const double* e = &data.raw[3 * j];
        double q[3];
        for (int k = 0; k < 3; ++k) {
          const double dt = probe.temperature ? data.dtemp_k[j] : 0.0;
          q[k] = (e[k] - c.o[k] - c.otc[k] * dt) /
                 (c.s[k] * (1.0 + c.gtc[k] * dt));
        }
        double b[3] = {q[0], c.m[1][0] * q[0] + c.m[1][1] * q[1],
                       c.m[2][0] * q[0] + c.m[2][1] * q[1] + c.m[2][2] * q[2]};
        for (int k = 0; k < probe.aux_count; ++k) {
          const double a = data.aux[j * probe.aux_count + k];
          for (int d = 0; d < 3; ++d) b[d] -= a * x[probe.aux(k) + d];
        }
        for (int d = 0; d < 3; ++d) w[3 * j + d] = b[d];
      }
    }
    const Eigen::Matrix3d q = WahbaRotation(w, data.b_ref, data.n);  // R^T
    const Eigen::Matrix3d r = q.transpose();
    std::vector<double> xv(layout.size(), 0.0);
    for (int i = 0; i < 9; ++i) xv[i] = x[i];
    RotationAngles(r, &xv[layout.misalign()]);
    if (layout.temperature) {
      for (int i = 0; i < 6; ++i) {
        xv[layout.gain_tc() + i] = x[scalar_layout.gain_tc() + i];
      }
    }
    for (int k = 0; k < layout.aux_count; ++k) {
      const Eigen::Vector3d gs(x[scalar_layout.aux(k)],
                               x[scalar_layout.aux(k) + 1],
                               x[scalar_layout.aux(k) + 2]);
      const Eigen::Vector3d gb = q * gs;  // sensor axes -> body axes
      for (int d = 0; d < 3; ++d) xv[layout.aux(k) + d] = gb(d);
    }
    // Weights: each residual class by its own RMS, re-estimated after each
    // solve (at most three; the floor keeps noise-free data finite).
    constexpr double kFloorNT = 1e-6;
    double rms_m = std::max(fit.rms_magnitude, kFloorNT);
    double rms_v = 0, dummy = 0;
    ResidualRms(data, layout, xv, &dummy, &rms_v);
    rms_v = std::max(rms_v, kFloorNT);
    for (int pass = 0; pass < 3; ++pass) {
      w_m = 1.0 / rms_m;
      w_v = 1.0 / rms_v;
      fit = Solve(data, layout, w_m, w_v, options, &xv);
      iterations += fit.iterations;
      if (!fit.converged) break;
      const double new_m = std::max(fit.rms_magnitude, kFloorNT);
      const double new_v = std::max(fit.rms_vector, kFloorNT);
      const bool stable = std::abs(new_m / rms_m - 1) < 0.2 &&
                          std::abs(new_v / rms_v - 1) < 0.2;
      rms_m = new_m;
      rms_v = new_v;
      if (stable) break;
    }
    x = xv;
  }
  s.set_iterations(static_cast<std::uint32_t>(iterations));
  s.set_residual_rms_after_nt(fit.rms_magnitude);
  if (vector) s.set_vector_residual_rms_after_nt(fit.rms_vector);
  s.set_condition_number(std::isfinite(fit.condition_number)
                             ? fit.condition_number
                             : 0.0);
  if (!fit.covariance_from_ceres) {
    s.add_warnings(
        "J^T J is (nearly) singular: standard errors from a clamped "
        "pseudo-inverse; undetermined parameters show huge values");
  }

  // Calibration values and standard errors.
  models::SensorCalibration& m = result.model;
  auto se = [&fit](int i) {
    const double v = fit.covariance(i, i);
    return v > 0 ? std::sqrt(v) : 0.0;
  };
  std::vector<ParameterInfo> params;
  for (int k = 0; k < 3; ++k) {
    m.gains[k] = x[layout.gains() + k];
    m.offsets_nT[k] = x[layout.offsets() + k];
    m.nonorthogonality_rad[k] = x[layout.nonorthogonality() + k];
    params.push_back({std::string("gain_") + kAxis[k], m.gains[k],
                      se(layout.gains() + k), f_mean, 1 << k,
                      ParameterInfo::kSensor, ""});
    params.push_back({std::string("offset_") + kAxis[k], m.offsets_nT[k],
                      se(layout.offsets() + k), 1.0, 1 << k,
                      ParameterInfo::kSensor, ""});
  }
  const int u_axes[3] = {1 | 2, 1 | 4, 2 | 4};
  for (int k = 0; k < 3; ++k) {
    params.push_back({"nonorthogonality_u" + std::to_string(k + 1),
                      m.nonorthogonality_rad[k],
                      se(layout.nonorthogonality() + k), f_mean, u_axes[k],
                      ParameterInfo::kSensor, ""});
  }
  if (layout.misalignment) {
    for (int k = 0; k < 3; ++k) {
      m.misalignment_rad[k] = x[layout.misalign() + k];
      params.push_back({std::string("misalignment_") + kAxis[k],
                        m.misalignment_rad[k], se(layout.misalign() + k),
                        f_mean, 0, ParameterInfo::kMisalign, ""});
    }
  }
  const double dt_max =
      std::max(std::abs(tmax - reference_temp_c), std::abs(tmin - reference_temp_c));
  if (layout.temperature) {
    m.reference_temp_c = reference_temp_c;
    for (int k = 0; k < 3; ++k) {
      m.gain_tc_per_K[k] = x[layout.gain_tc() + k];
      m.offset_tc_nT_per_K[k] = x[layout.offset_tc() + k];
      params.push_back({std::string("gain_tc_") + kAxis[k],
                        m.gain_tc_per_K[k], se(layout.gain_tc() + k),
                        f_mean * dt_max, 0, ParameterInfo::kTemperature, ""});
      params.push_back({std::string("offset_tc_") + kAxis[k],
                        m.offset_tc_nT_per_K[k], se(layout.offset_tc() + k),
                        dt_max, 0, ParameterInfo::kTemperature, ""});
    }
  }
  for (int k = 0; k < layout.aux_count; ++k) {
    for (int d = 0; d < 3; ++d) {
      params.push_back({"aux_" + options.aux_channels[k] + "_" + kAxis[d],
                        x[layout.aux(k) + d], se(layout.aux(k) + d),
                        aux_max[k], 0, ParameterInfo::kAux,
                        options.aux_channels[k]});
    }
  }

  // Summary values.
  auto vec_of = [&](int offset, double scale, proto::Vector3* v) {
    SetVec(v, x[offset] * scale, x[offset + 1] * scale, x[offset + 2] * scale);
  };
  auto se_of = [&](int offset, double scale, proto::Vector3* v) {
    SetVec(v, se(offset) * scale, se(offset + 1) * scale,
           se(offset + 2) * scale);
  };
  vec_of(layout.gains(), 1.0, s.mutable_gains());
  vec_of(layout.offsets(), 1.0, s.mutable_offsets_nt());
  vec_of(layout.nonorthogonality(), 1.0 / kDeg,
         s.mutable_nonorthogonality_deg());
  se_of(layout.gains(), 1.0, s.mutable_gains_std_error());
  se_of(layout.offsets(), 1.0, s.mutable_offsets_std_error_nt());
  se_of(layout.nonorthogonality(), 1.0 / kDeg,
        s.mutable_nonorthogonality_std_error_deg());
  if (layout.misalignment) {
    vec_of(layout.misalign(), 1.0 / kDeg, s.mutable_misalignment_deg());
    se_of(layout.misalign(), 1.0 / kDeg,
          s.mutable_misalignment_std_error_deg());
    s.set_misalignment_note(
        "determined from roll, pitch, heading and the WMM2025 direction; "
        "includes any constant attitude (INS mounting) error");
  } else {
    s.set_misalignment_note("not determined (magnitude-only calibration)");
  }
  if (layout.temperature) {
    proto::TemperatureFit* t = s.mutable_temperature();
    t->set_channel(options.temperature_channel);
    t->set_reference_temp_c(reference_temp_c);
    t->set_min_temp_c(tmin);
    t->set_max_temp_c(tmax);
    vec_of(layout.gain_tc(), 1.0, t->mutable_gain_tc_per_k());
    se_of(layout.gain_tc(), 1.0, t->mutable_gain_tc_std_error_per_k());
    vec_of(layout.offset_tc(), 1.0, t->mutable_offset_tc_nt_per_k());
    se_of(layout.offset_tc(), 1.0, t->mutable_offset_tc_std_error_nt_per_k());
  }
  for (int k = 0; k < layout.aux_count; ++k) {
    proto::AuxCoupling* a = s.add_aux();
    a->set_channel(options.aux_channels[k]);
    vec_of(layout.aux(k), 1.0, a->mutable_coupling_nt_per_unit());
    se_of(layout.aux(k), 1.0, a->mutable_std_error_nt_per_unit());
  }

  // Coverage of field directions in sensor axes (before R).
  {
    ModelCoefficients<double> c;
    ParameterLayout sensor_axes = layout;
    sensor_axes.misalignment = false;
    std::vector<double> xs(x);
    if (layout.misalignment) {
      xs.erase(xs.begin() + layout.misalign(), xs.begin() + layout.misalign() + 3);
    }
    PrepareCoefficients(sensor_axes, xs.data(), &c);
    std::vector<double> ux(data.n), uy(data.n), uz(data.n);
    for (std::size_t j = 0; j < data.n; ++j) {
      const double* e = &data.raw[3 * j];
      const double q0 = (e[0] - c.o[0]) * c.inv_s[0];
      const double q1 = (e[1] - c.o[1]) * c.inv_s[1];
      const double q2 = (e[2] - c.o[2]) * c.inv_s[2];
      ux[j] = q0;
      uy[j] = c.m[1][0] * q0 + c.m[1][1] * q1;
      uz[j] = c.m[2][0] * q0 + c.m[2][1] * q1 + c.m[2][2] * q2;
    }
    *s.mutable_coverage() =
        ComputeDirectionCoverage(data.n, ux.data(), uy.data(), uz.data());
  }

  // Separability.
  s.add_separability(
      "hard iron of the platform and the sensor offsets: not separable "
      "(both are a constant field in body axes); the offsets hold both");
  s.add_separability(
      "soft iron of the platform and the gains/non-orthogonality: folded "
      "together into S P (its symmetric part cannot be told apart)");
  if (layout.misalignment) {
    s.add_separability(
        "misalignment: determined by the attitude-aided fit; it also holds "
        "the rotation part of soft iron and any constant attitude error");
  } else {
    s.add_separability(
        "rotation between sensor and body axes: not determined by a "
        "magnitude-only calibration (|B| is the same for every rotation)");
  }
  if (layout.aux_count) {
    s.add_separability(
        "aux couplings: the constant part of a channel adds to the offsets; "
        "only its variation is determined");
  }

  // Is the result usable?
  std::vector<std::string> problems;
  if (!fit.converged) {
    problems.push_back("the fit did not converge (" + fit.message + ")");
  }
  if (!std::isfinite(fit.rms_magnitude)) {
    problems.push_back("the residuals are not finite");
  }
  std::vector<ParameterInfo> undetermined;
  for (const ParameterInfo& p : params) {
    const double effect = p.std_error * p.effect_per_unit;
    if (!(effect <= options.max_std_error_nT)) {
      undetermined.push_back(p);
      proto::Undetermined* u = s.add_undetermined();
      u->set_parameter(p.name);
      u->set_std_error(std::isfinite(p.std_error) ? p.std_error : 0.0);
      u->set_effect_nt(std::isfinite(effect) ? effect : 0.0);
    }
  }
  if (!undetermined.empty()) {
    std::vector<std::string> names;
    for (const ParameterInfo& p : undetermined) names.push_back(p.name);
    problems.push_back(
        "the recording does not determine " + JoinNames(names) +
        " (standard error x effect above " +
        Fmt("%.3g", options.max_std_error_nT) + " nT; " +
        Fmt("%.0f", 100.0 * s.coverage().fraction()) +
        "% of the sphere of field directions visited). To fly: " +
        WhatToFly(s.coverage(), undetermined));
  }
  for (int k = 0; k < 3; ++k) {
    if (m.gains[k] < 0.8 || m.gains[k] > 1.25) {
      s.add_warnings(std::string("gain_") + kAxis[k] + " = " +
                     Fmt("%.4f", m.gains[k]) +
                     ": far from 1; check the units and the axis mapping");
    }
    if (std::abs(m.nonorthogonality_rad[k]) > 5 * kDeg) {
      s.add_warnings("non-orthogonality u" + std::to_string(k + 1) + " = " +
                     Fmt("%.2f", m.nonorthogonality_rad[k] / kDeg) +
                     " deg: large; check the axis mapping");
    }
    if (layout.misalignment && std::abs(m.misalignment_rad[k]) > 5 * kDeg) {
      s.add_warnings(std::string("misalignment about ") + kAxis[k] + " = " +
                     Fmt("%.2f", m.misalignment_rad[k] / kDeg) +
                     " deg: large; check that heading is from true (not "
                     "magnetic) north and the axis mapping");
    }
  }
  s.set_accepted(problems.empty());
  if (!problems.empty()) {
    std::string refusal;
    for (std::size_t i = 0; i < problems.size(); ++i) {
      refusal += (i ? "; " : "") + problems[i];
    }
    s.set_refusal(refusal);
  }

  // The calibration file's content.
  proto::SensorCalibration& cal = result.calibration;
  ToProto(m, layout.misalignment, &cal);
  *cal.mutable_gains_std_error() = s.gains_std_error();
  *cal.mutable_offsets_std_error_nt() = s.offsets_std_error_nt();
  *cal.mutable_nonorthogonality_std_error_deg() =
      s.nonorthogonality_std_error_deg();
  if (layout.misalignment) {
    *cal.mutable_misalignment_std_error_deg() = s.misalignment_std_error_deg();
  }
  if (layout.temperature) {
    cal.set_temperature_channel(options.temperature_channel);
    *cal.mutable_gain_tc_std_error_per_k() =
        s.temperature().gain_tc_std_error_per_k();
    *cal.mutable_offset_tc_std_error_nt_per_k() =
        s.temperature().offset_tc_std_error_nt_per_k();
  }
  for (const proto::AuxCoupling& a : s.aux()) *cal.add_aux() = a;
  cal.set_residual_rms_before_nt(s.residual_rms_before_nt());
  cal.set_residual_rms_after_nt(s.residual_rms_after_nt());
  cal.set_vector_residual_rms_before_nt(s.vector_residual_rms_before_nt());
  cal.set_vector_residual_rms_after_nt(s.vector_residual_rms_after_nt());
  cal.set_reference(s.reference());
  cal.set_mode(s.mode());
  cal.set_samples_used(s.samples_used());
  cal.set_coverage_fraction(s.coverage().fraction());
  cal.set_source(options.source);
  cal.set_decimal_year(need_wmm ? options.decimal_year : 0.0);
  cal.set_schema_version(1);

  s.set_solve_time_s(std::chrono::duration<double>(
                         std::chrono::steady_clock::now() - start)
                         .count());
  return result;
}

// --- Text summary ----------------------------------------------------------

namespace {

std::string Row3(const char* label, const proto::Vector3& v,
                 const proto::Vector3& se, const char* format,
                 const char* unit) {
  std::string s = "  ";
  s += label;
  s.resize(22, ' ');
  const double vals[3] = {v.x(), v.y(), v.z()};
  const double errs[3] = {se.x(), se.y(), se.z()};
  for (int k = 0; k < 3; ++k) {
    char buf[96];
    char fmt[48];
    // Standard errors with two significant digits: the value's fixed
    // format would print most of them as zero.
    std::snprintf(fmt, sizeof fmt, "%s %s +-%%.2g", kAxis[k], format);
    std::snprintf(buf, sizeof buf, fmt, vals[k] + 0.0, errs[k]);
    std::string cell = buf;
    cell.resize(std::max<std::size_t>(cell.size() + 1, 26), ' ');
    s += cell;
  }
  s += unit;
  s += "\n";
  return s;
}

}  // namespace

std::string FormatCalibrationSummary(const proto::CalibrationSummary& s) {
  std::ostringstream out;
  out << "fluxgate calibration (" << s.mode() << ", reference: "
      << s.reference() << ")\n";
  if (!s.file().empty()) out << "  recording: " << s.file() << "\n";
  out << "  samples: " << s.samples_used() << " used of " << s.samples()
      << "\n";
  out << "model: " << s.model();
  if (s.samples_used() == 0 || (!s.accepted() && !s.has_gains())) {
    out << "REFUSED: " << s.refusal() << "\n";
    return out.str();
  }
  out << "parameters (value +- standard error):\n";
  out << Row3("gains", s.gains(), s.gains_std_error(), "%.6f", "");
  out << Row3("offsets", s.offsets_nt(), s.offsets_std_error_nt(), "%.2f",
              "nT");
  out << Row3("non-orthogonality", s.nonorthogonality_deg(),
              s.nonorthogonality_std_error_deg(), "%.4f", "deg (u1 u2 u3)");
  if (s.has_misalignment_deg()) {
    out << Row3("misalignment", s.misalignment_deg(),
                s.misalignment_std_error_deg(), "%.4f", "deg");
  } else {
    out << "  misalignment          " << s.misalignment_note() << "\n";
  }
  if (s.has_temperature()) {
    const proto::TemperatureFit& t = s.temperature();
    out << "  temperature channel '" << t.channel() << "', reference "
        << Fmt("%.2f", t.reference_temp_c()) << " C, range "
        << Fmt("%.2f", t.min_temp_c()) << " .. "
        << Fmt("%.2f", t.max_temp_c()) << " C\n";
    out << Row3("gain tc", t.gain_tc_per_k(), t.gain_tc_std_error_per_k(),
                "%.3e", "1/K");
    out << Row3("offset tc", t.offset_tc_nt_per_k(),
                t.offset_tc_std_error_nt_per_k(), "%.3f", "nT/K");
  }
  for (const proto::AuxCoupling& a : s.aux()) {
    const std::string label = "aux " + a.channel();
    out << Row3(label.c_str(), a.coupling_nt_per_unit(),
                a.std_error_nt_per_unit(), "%.3f", "nT/unit");
  }
  out << "residual RMS of |B| - F: " << Fmt("%.3f", s.residual_rms_before_nt())
      << " nT -> " << Fmt("%.3f", s.residual_rms_after_nt()) << " nT\n";
  if (s.mode() == "vector") {
    out << "residual RMS of B - B_ref (per component): "
        << Fmt("%.3f", s.vector_residual_rms_before_nt()) << " nT -> "
        << Fmt("%.3f", s.vector_residual_rms_after_nt()) << " nT\n";
  }
  const proto::DirectionCoverage& c = s.coverage();
  out << "coverage: " << c.cells_hit() << " of " << c.cells()
      << " equal-area cells of field directions ("
      << Fmt("%.0f", 100.0 * c.fraction()) << "%)";
  if (c.eigenvalues_size() == 3) {
    out << ", scatter eigenvalues " << Fmt("%.3f", c.eigenvalues(0)) << " "
        << Fmt("%.3f", c.eigenvalues(1)) << " "
        << Fmt("%.3f", c.eigenvalues(2)) << " (1/3 each = isotropic)";
  }
  out << "\n";
  if (s.has_wmm()) {
    out << "WMM2025 at " << Fmt("%.3f", s.wmm().decimal_year())
        << ": |F| " << Fmt("%.1f", s.wmm().f_min_nt()) << " .. "
        << Fmt("%.1f", s.wmm().f_max_nt()) << " nT along the recording "
        << "(range " << Fmt("%.2f", s.wmm().f_range_nt()) << " nT), "
        << "inclination " << Fmt("%.2f", s.wmm().inclination_deg())
        << " deg\n";
  }
  out << "fit: " << s.iterations() << " iterations, condition number "
      << (s.condition_number() > 0 ? Fmt("%.3g", s.condition_number())
                                   : std::string("infinite (singular)"))
      << ", "
      << Fmt("%.2f", s.solve_time_s()) << " s\n";
  out << "separability:\n";
  for (const std::string& n : s.separability()) out << "  - " << n << "\n";
  for (const std::string& w : s.warnings()) out << "warning: " << w << "\n";
  if (!s.accepted()) out << "REFUSED: " << s.refusal() << "\n";
  return out.str();
}

}  // namespace fluxtrim::core
