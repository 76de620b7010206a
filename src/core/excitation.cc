#include "src/core/excitation.h"

#include <Eigen/Core>
#include <Eigen/SVD>
#include <algorithm>
#include <cmath>
#include <cstdio>
#include <memory>
#include <stdexcept>

#include "io/error.h"
#include "src/core/fit.h"
#include "src/core/lag.h"
#include "src/core/least_squares.h"
#include "src/core/ridge.h"

namespace fluxtrim::core {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();


std::string Sci(double v) {
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, "%.3g", v);
  return buffer;
}

bool StartsWith(const std::string& s, const char* prefix) {
  return s.rfind(prefix, 0) == 0;
}

std::string GroupOf(const std::string& name) {
  if (StartsWith(name, "perm_")) return "permanent";
  if (StartsWith(name, "ind_")) return "induced";
  if (StartsWith(name, "eddy_")) return "eddy";
  // aux_<col>_x: the group is aux_<col>.
  return name.substr(0, name.size() - 2);
}

// Singular values of columns `cols` of a / sqrt(rows), descending.
std::vector<double> GroupSingularValues(const Eigen::MatrixXd& a,
                                        const std::vector<int>& cols) {
  Eigen::MatrixXd g(a.rows(), static_cast<long>(cols.size()));
  for (std::size_t c = 0; c < cols.size(); ++c) {
    g.col(static_cast<long>(c)) = a.col(cols[c]);
  }
  // The singular values of A equal those of its R factor (A = Q R).
  const CompressedSystem s = Compress(g, Eigen::VectorXd::Zero(g.rows()));
  const Eigen::JacobiSVD<Eigen::MatrixXd> svd(s.r);
  const double root_n =
      std::sqrt(static_cast<double>(std::max<long>(1, a.rows())));
  std::vector<double> out;
  for (long i = 0; i < svd.singularValues().size(); ++i) {
    out.push_back(svd.singularValues()(i) / root_n);
  }
  return out;
}

}  // namespace

bool ExcitationOptions::IsValid(std::string* error) const {
  std::string band_error;
  if (!band.IsValid(&band_error)) {
    *error = band_error;
    return false;
  }
  if (derivative_half_width < 0) {
    *error = "derivative half-width must be >= 0 (0: automatic)";
    return false;
  }
  if (!(gap_factor > 1.0) || !std::isfinite(gap_factor)) {
    *error = "gap factor must be a finite number > 1";
    return false;
  }
  if (!(edge_trim_s >= 0.0) || !std::isfinite(edge_trim_s)) {
    *error = "edge trim must be a finite number >= 0 s";
    return false;
  }
  if (!(shape_null_singular_value > 0 && shape_null_singular_value < 1) ||
      !(undetermined_fraction > 0) || max_shape_rows < 1) {
    *error = "excitation thresholds must be positive (shape threshold < 1)";
    return false;
  }
  return true;
}

std::vector<std::string> ExcitationSummary::UndeterminedTerms() const {
  std::vector<std::string> out;
  for (const TermExcitation& t : terms) {
    if (!t.determined) out.push_back(t.name);
  }
  return out;
}

ExcitationSummary AnalyseExcitation(const io::Table& table,
                                    const ExcitationOptions& options) {
  std::string error;
  if (!options.IsValid(&error)) throw std::invalid_argument(error);
  for (const char* name : {"bx", "by", "bz"}) {
    if (!table.Has(name)) {
      throw io::InputError(options.source, std::string("channel ") + name,
                           "expected the fluxgate channels bx, by, bz");
    }
  }
  for (const std::string& name : options.terms.aux) {
    if (!table.Has(name)) {
      throw io::InputError(options.source, "channel " + name,
                           "expected the --aux channel in the recording");
    }
  }
  ExcitationSummary result;
  const std::size_t n = table.rows();
  if (options.max_samples > 0 && n > options.max_samples) {
    result.message = "recording has " + std::to_string(n) +
                     " samples, more than the " +
                     std::to_string(options.max_samples) +
                     " the excitation check holds in memory: cut out the "
                     "compensation flight";
    return result;
  }
  const std::vector<double>& time = table.Column(table.time_channel());
  const double rate = EstimateSampleRate(time, options.source);
  const int k = options.derivative_half_width > 0
                    ? options.derivative_half_width
                    : DefaultDerivativeHalfWidth(rate);
  result.sample_rate_hz = rate;
  result.derivative_half_width = k;
  const BandPass band(options.band, rate);

  const TermInputs inputs = SelectTermInputs(table, options.terms.aux);
  const double* f = inputs.f;
  const std::vector<const double*>& aux = inputs.aux;
  const std::vector<double>& aux_rms = inputs.aux_rms;
  result.field_source = f ? "f" : "|B|";

  models::TermEngine::Options engine;
  engine.terms = options.terms;
  engine.half_width = k;
  engine.sample_rate_hz = rate;
  engine.gap_factor = options.gap_factor;
  const models::TermMatrix tm = models::BuildTermMatrix(
      engine, n, time.data(), table.Column("bx").data(),
      table.Column("by").data(), table.Column("bz").data(), f, aux);
  const std::vector<std::string> names = models::TermNames(options.terms);
  const std::size_t p = names.size();

  // ---- runs (fit.cc's segment rule) --------------------------------------
  std::vector<double> field(n), good_time(n), good_field(n);
  for (std::size_t i = 0; i < n; ++i) {
    field[i] = f ? f[i] : tm.bt[i];
    bool ok =
        !(tm.flags[i] & models::kFlagBadSample) && std::isfinite(field[i]);
    for (const double* a : aux) ok = ok && std::isfinite(a[i]);
    good_time[i] = ok ? time[i] : kNaN;
    good_field[i] = ok ? field[i] : kNaN;
  }
  const double trim_s =
      options.edge_trim_s > 0 ? options.edge_trim_s : 0.5 / band.low_hz();
  const std::size_t trim = static_cast<std::size_t>(std::ceil(trim_s * rate));
  struct Run {
    std::size_t begin, end, fit_begin, fit_end;
  };
  std::vector<Run> runs;
  std::size_t rows = 0;
  const std::size_t kk = static_cast<std::size_t>(k);
  for (const SampleRun& r :
       ContiguousRuns(good_time, good_field, rate, options.gap_factor)) {
    if (r.end - r.begin <= 2 * kk) continue;
    Run run{r.begin + kk, r.end - kk, 0, 0};
    const std::size_t len = run.end - run.begin;
    if (len < band.min_length() || len <= 2 * trim + 1) continue;
    run.fit_begin = run.begin + trim;
    run.fit_end = run.end - trim;
    rows += run.fit_end - run.fit_begin;
    runs.push_back(run);
  }
  // The fit's floor (fit.cc): 20 rows per term and five periods of the
  // band's lower edge.
  const std::size_t min_rows = std::max<std::size_t>(
      20 * p, static_cast<std::size_t>(5.0 / band.low_hz() * rate));
  if (rows < min_rows) {
    result.message = "only " + Sci(static_cast<double>(rows) / rate) +
                     " s of band-passed data between gaps (need " +
                     Sci(static_cast<double>(min_rows) / rate) +
                     " s, about five periods of the band's lower edge): too "
                     "short or too gappy for the excitation check";
    return result;
  }
  result.rows = rows;

  // ---- band-passed columns and field -----------------------------------
  auto band_pass = [&](auto value_at, double* out_rows, long stride) {
    std::vector<double> x, y;
    long row = 0;
    for (const Run& run : runs) {
      x.resize(run.end - run.begin);
      y.resize(x.size());
      for (std::size_t i = run.begin; i < run.end; ++i)
        x[i - run.begin] = value_at(i);
      band.Filter(x.data(), x.size(), y.data());
      for (std::size_t i = run.fit_begin; i < run.fit_end; ++i) {
        out_rows[row++ * stride] = y[i - run.begin];
      }
    }
  };
  const long nr = static_cast<long>(rows);
  const long np = static_cast<long>(p);
  Eigen::MatrixXd a(nr, np);  // column-major: column j is contiguous
  for (std::size_t j = 0; j < p; ++j) {
    band_pass([&](std::size_t i) { return tm.values[i * p + j]; },
              a.col(static_cast<long>(j)).data(), 1);
  }
  Eigen::VectorXd y(nr);
  band_pass([&](std::size_t i) { return field[i]; }, y.data(), 1);

  // Noise gain sum g_k^2 of the zero-phase filter (as fit.cc): the white
  // noise behind a band-passed residual has variance band variance / gain.
  double noise_gain = 1.0;
  {
    const std::size_t len = std::max<std::size_t>(
        band.min_length() + 1,
        static_cast<std::size_t>(40.0 * rate / band.low_hz()));
    std::vector<double> impulse(len, 0.0);
    impulse[len / 2] = 1.0;
    double s = 0;
    for (double v : band.Filter(impulse)) s += v * v;
    if (s > 0) noise_gain = s;
  }

  // ---- per-term figures, equilibration ------------------------------------
  std::vector<bool> held(p, false);
  std::vector<std::string> reason(p);
  Eigen::VectorXd scale(np);
  const double root_n = std::sqrt(static_cast<double>(rows));
  result.terms.resize(p);
  for (std::size_t j = 0; j < p; ++j) {
    TermExcitation& t = result.terms[j];
    t.name = names[j];
    t.group = GroupOf(names[j]);
    t.unit = TermUnit(names[j]);
    if (StartsWith(t.name, "perm_")) {
      t.plausible_bound = kMaxPermanentNT;
    } else if (StartsWith(t.name, "ind_")) {
      t.plausible_bound = kMaxInduced;
    } else if (StartsWith(t.name, "eddy_")) {
      t.plausible_bound = kMaxEddyS;
    } else {
      const std::size_t c = (j - (p - 3 * aux.size())) / 3;
      t.plausible_bound = aux_rms[c] > 0
                              ? kMaxPermanentNT / aux_rms[c]
                              : std::numeric_limits<double>::infinity();
    }
    const long jj = static_cast<long>(j);
    t.band_rms = a.col(jj).norm() / root_n;
    double raw = 0;
    for (const Run& run : runs) {
      for (std::size_t i = run.fit_begin; i < run.fit_end; ++i) {
        raw += tm.values[i * p + j] * tm.values[i * p + j];
      }
    }
    raw = std::sqrt(raw / static_cast<double>(rows));
    if (!(t.band_rms > 1e-12 * std::max(1.0, raw)) ||
        !std::isfinite(t.band_rms)) {
      held[j] = true;
      reason[j] = "no variation in the band (not excited)";
      scale(jj) = 1.0;
    } else {
      scale(jj) = t.band_rms;
    }
  }

  // ---- singular values per group --------------------------------------------
  for (std::size_t j = 0; j < p; ++j) {
    const std::string& g = result.terms[j].group;
    auto it =
        std::find_if(result.groups.begin(), result.groups.end(),
                     [&](const GroupExcitation& e) { return e.group == g; });
    if (it == result.groups.end()) {
      GroupExcitation e;
      e.group = g;
      if (g == "permanent") {
        e.column_unit = "1";
      } else if (g == "induced") {
        e.column_unit = "nT";
      } else if (g == "eddy") {
        e.column_unit = "nT/s";
      } else {
        const io::ChannelInfo& info =
            table.channel(static_cast<std::size_t>(table.Find(g.substr(4))))
                .info;
        e.column_unit = info.unit.empty() ? "channel unit" : info.unit;
      }
      result.groups.push_back(e);
      it = result.groups.end() - 1;
    }
    it->terms.push_back(names[j]);
  }
  for (GroupExcitation& g : result.groups) {
    std::vector<int> cols;
    for (std::size_t j = 0; j < p; ++j) {
      if (result.terms[j].group == g.group) cols.push_back(static_cast<int>(j));
    }
    g.singular_values = GroupSingularValues(a, cols);
  }

  // ---- term shapes (fit.cc): columns without Bt, de-meaned, unit RMS -----
  Eigen::MatrixXd shapes;
  {
    std::vector<std::size_t> fit_rows;
    for (const Run& run : runs) {
      for (std::size_t i = run.fit_begin; i < run.fit_end; ++i)
        fit_rows.push_back(i);
    }
    const std::size_t stride = std::max<std::size_t>(
        1, (rows + options.max_shape_rows - 1) / options.max_shape_rows);
    const long m = static_cast<long>((rows + stride - 1) / stride);
    shapes.resize(m, np);
    for (long r = 0; r < m; ++r) {
      const std::size_t i = fit_rows[static_cast<std::size_t>(r) * stride];
      for (std::size_t j = 0; j < p; ++j) {
        double v = tm.values[i * p + j];
        if (StartsWith(names[j], "ind_") || StartsWith(names[j], "eddy_"))
          v /= tm.bt[i];
        shapes(r, static_cast<long>(j)) = v;
      }
    }
    for (long j = 0; j < np; ++j) {
      shapes.col(j).array() -= shapes.col(j).mean();
      const double rms =
          shapes.col(j).norm() / std::sqrt(static_cast<double>(m));
      if (rms > 0 && std::isfinite(rms)) {
        shapes.col(j) /= rms;
      } else {
        shapes.col(j).setZero();
      }
    }
  }
  const CompressedSystem shape_system =
      Compress(shapes, Eigen::VectorXd::Zero(shapes.rows()));

  // Equilibrated in place (the group singular values above are done).
  for (long j = 0; j < np; ++j) {
    if (held[static_cast<std::size_t>(j)]) {
      a.col(j).setZero();
    } else {
      a.col(j) /= scale(j);
    }
  }
  const CompressedSystem system = Compress(a, y);

  // ---- determination, one term at a time -------------------------------
  const double n_rows = static_cast<double>(rows);
  for (std::size_t round = 0; round <= p; ++round) {
    if (FreeColumns(held).empty()) break;
    if (HoldNullDirection(shape_system, options.shape_null_singular_value,
                          "not excited independently of the other terms",
                          &held, &reason)) {
      continue;
    }
    if (HoldNullDirection(system, kNullSingularValue,
                          "no independent excitation", &held, &reason)) {
      continue;
    }
    const std::vector<int> free = FreeColumns(held);
    const CompressedSystem sub = SubSystem(system, free);
    const long q = sub.r.cols();
    const Eigen::VectorXd x = sub.r.triangularView<Eigen::Upper>().solve(sub.z);
    const double band_sigma =
        std::sqrt(sub.outside_sum_squares /
                  std::max(1.0, n_rows - static_cast<double>(q)));
    result.residual_rms_nT = std::sqrt(sub.outside_sum_squares / n_rows);
    const double sigma2 = band_sigma * band_sigma / noise_gain;
    Eigen::MatrixXd rinv = Eigen::MatrixXd::Identity(q, q);
    sub.r.triangularView<Eigen::Upper>().solveInPlace(rinv);
    double worst = 1.0;
    long worst_j = -1;
    std::string worst_note;
    for (long i = 0; i < q; ++i) {
      const std::size_t j =
          static_cast<std::size_t>(free[static_cast<std::size_t>(i)]);
      TermExcitation& t = result.terms[j];
      const double sc = scale(static_cast<long>(j));
      const double row_norm = rinv.row(i).norm();
      t.std_error = std::sqrt(sigma2) * row_norm / sc;
      t.independent_rms = row_norm > 0 ? sc / (row_norm * root_n) : 0.0;
      const double value = x(i) / sc;
      const double bound = t.plausible_bound;
      const double r_excite = band_sigma / (bound * sc);
      const double r_value = std::fabs(value) / bound;
      const double r_se = t.std_error / (options.undetermined_fraction * bound);
      if (std::isfinite(r_excite) && r_excite > worst) {
        worst = r_excite;
        worst_j = static_cast<long>(j);
        worst_note = "not excited: even +-" + Sci(bound) + " " + t.unit +
                     " would change the band-passed field by only " +
                     Sci(bound * sc) + " nT RMS, below the residual " +
                     Sci(band_sigma) + " nT";
      }
      if (std::isfinite(r_value) && r_value > worst) {
        worst = r_value;
        worst_j = static_cast<long>(j);
        worst_note = "implausible least-squares value " + Sci(value) + " " +
                     t.unit + " (plausible within +-" + Sci(bound) + ")";
      }
      if (std::isfinite(r_se) && r_se > worst) {
        worst = r_se;
        worst_j = static_cast<long>(j);
        worst_note = "standard error " + Sci(t.std_error) + " " + t.unit +
                     " exceeds " + Sci(options.undetermined_fraction * bound);
      }
    }
    if (worst_j < 0) break;
    held[static_cast<std::size_t>(worst_j)] = true;
    reason[static_cast<std::size_t>(worst_j)] = worst_note;
  }

  for (std::size_t j = 0; j < p; ++j) {
    TermExcitation& t = result.terms[j];
    if (!held[j]) continue;
    t.determined = false;
    t.reason = reason[j];
    t.std_error = kNaN;
    t.independent_rms = kNaN;
    for (GroupExcitation& g : result.groups) {
      if (g.group == t.group) g.undetermined_terms.push_back(t.name);
    }
  }
  result.usable = true;
  return result;
}

}  // namespace fluxtrim::core
