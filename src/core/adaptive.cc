#include "src/core/adaptive.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>
#include <stdexcept>

#include "io/error.h"
#include "models/tolles_lawson.h"

namespace fluxtrim::core {
namespace {

// Flags that keep a sample out of the RLS (it is still filtered).
constexpr std::uint32_t kSkipFlags =
    models::kFlagGapEdge | models::kFlagDerivativeInvalid |
    models::kFlagAttitudeOutside | models::kFlagBadSample |
    models::kFlagLagEdge;

BandPass ModelBandPass(const proto::CompensationModel& model,
                       const std::string& source) {
  BandPassOptions o;
  if (model.filter().order() > 0) {
    o.order = model.filter().order();
    o.low_hz = model.filter().low_hz();
    o.high_hz = model.filter().high_hz();
  }
  std::string why;
  if (!o.IsValid(&why)) throw io::InputError(source, "filter", why);
  try {
    return BandPass(o, model.sample_rate_hz());
  } catch (const std::invalid_argument& e) {
    throw io::InputError(source, "filter", e.what());
  }
}

}  // namespace

bool AdaptOptions::IsValid(std::string* error) const {
  std::string why;
  if (!(drift_sigma_per_min >= 0.0 && std::isfinite(drift_sigma_per_min))) {
    why =
        "drift must be zero or a positive number of standard errors per "
        "minute";
  } else if (!(bound_sigma > 0.0 && std::isfinite(bound_sigma))) {
    why = "bound must be a positive number of standard errors";
  } else if (!(update_interval_s > 0.0 && std::isfinite(update_interval_s))) {
    why = "update interval must be positive (s)";
  } else if (!(warmup_s >= 0.0 && std::isfinite(warmup_s))) {
    why = "warm-up must be zero or positive (s)";
  }
  if (error) *error = why;
  return why.empty();
}

Adapter::Adapter(const proto::CompensationModel& model,
                 const AdaptOptions& options, const std::string& source,
                 std::function<void(const AdaptUpdate&)> on_update)
    : options_(options),
      on_update_(std::move(on_update)),
      band_pass_(ModelBandPass(model, source)),
      filter_(band_pass_, 1) {
  std::string why;
  if (!options_.IsValid(&why)) throw std::invalid_argument("adapt: " + why);
  residual_sigma_ = model.quality().residual_sigma_nt();
  if (!(residual_sigma_ > 0.0 && std::isfinite(residual_sigma_))) {
    throw io::InputError(source, "quality.residual_sigma_nT",
                         "adaptation needs the fit's band-passed residual "
                         "sigma (a positive number); refit the model");
  }
  const std::size_t p = static_cast<std::size_t>(model.coefficients_size());
  for (std::size_t j = 0; j < p; ++j) {
    const proto::Coefficient& c = model.coefficients(static_cast<int>(j));
    names_.push_back(c.name());
    theta_fit_.push_back(c.value());
    if (!c.held() && c.std_error() > 0.0 && std::isfinite(c.std_error())) {
      adapted_.push_back(j);
      sigma_.push_back(c.std_error());
    }
  }
  if (adapted_.empty()) {
    throw io::InputError(source, "coefficients",
                         "adaptation needs at least one fitted (not held) "
                         "coefficient with a positive std_error");
  }
  const std::size_t m = adapted_.size();
  filter_ = CausalBandPass(band_pass_, 1 + m);
  const double rate = model.sample_rate_hz();
  interval_samples_ = static_cast<std::size_t>(
      std::max(1.0, std::round(options_.update_interval_s * rate)));
  const double warmup_s =
      options_.warmup_s > 0 ? options_.warmup_s : 2.0 / band_pass_.low_hz();
  warmup_samples_ = static_cast<std::size_t>(std::ceil(warmup_s * rate));
  z_.assign(m, 0.0);
  applied_z_.assign(m, 0.0);
  // P = 0: the fit is the start, exactly (header comment).
  p_.assign(m * m, 0.0);
  q_ = options_.drift_sigma_per_min * options_.drift_sigma_per_min /
       (60.0 * rate);
  const double colour = std::max(
      1.0, rate / (2.0 * (band_pass_.high_hz() - band_pass_.low_hz())));
  r_ = residual_sigma_ * residual_sigma_ * colour;
  in_.assign(1 + m, 0.0);
  out_.assign(1 + m, 0.0);
  u_.assign(m, 0.0);
  pu_.assign(m, 0.0);
  theta_ = theta_fit_;
  applied_theta_ = theta_fit_;
  mean_ = model.interference_mean_nt();
  summary_.adapted_terms = m;
  summary_.change_sigma.assign(p, 0.0);
  summary_.coefficients = theta_fit_;
}

void Adapter::Observe(models::Compensator& compensator,
                      const models::CompensatedSample* samples, int n) {
  const std::size_t m = adapted_.size();
  const std::size_t p = theta_fit_.size();
  for (int i = 0; i < n; ++i) {
    const models::CompensatedSample& s = samples[i];
    ++summary_.samples_seen;
    ++seen_since_update_;
    const double* row = compensator.TermRow(s.index);
    const bool contiguous = any_seen_ && s.index == last_index_ + 1;
    any_seen_ = true;
    last_index_ = s.index;
    // g = f(t + lag) - row . theta_fit; f_comp + f_interference is the
    // aligned f whatever coefficients the compensator used.
    double g = s.f_comp + s.f_interference;
    for (std::size_t j = 0; j < p; ++j) g -= row[j] * theta_fit_[j];
    bool finite = std::isfinite(g) && std::isfinite(s.time);
    for (std::size_t a = 0; a < m && finite; ++a) {
      finite = std::isfinite(row[adapted_[a]]);
    }
    if (!finite || !contiguous || (s.flags & models::kFlagGapEdge)) {
      filter_.Reset();
      if (!finite) continue;
    }
    in_[0] = g;
    for (std::size_t a = 0; a < m; ++a) in_[1 + a] = row[adapted_[a]];
    filter_.Step(in_.data(), out_.data());
    if (filter_.samples() > warmup_samples_ && !(s.flags & kSkipFlags)) {
      for (std::size_t a = 0; a < m; ++a) u_[a] = out_[1 + a] * sigma_[a];
      Step(u_.data(), out_[0]);
      ++since_update_;
      ++summary_.samples_used;
    }
    if (seen_since_update_ >= interval_samples_ && since_update_ > 0) {
      Update(compensator, s.time, row);
    }
  }
}

void Adapter::Step(const double* u, double y) {
  // Kalman filter for a random-walk state z with the scalar measurement
  // y = u'z + v (Haykin, Adaptive Filter Theory, 4th ed., ch. 10, from
  // memory): predict P += Q, then gain k = P u / (u'P u + r),
  // z += k (y - u'z), P -= k (P u)'. O(m^2) a sample.
  const std::size_t m = adapted_.size();
  double* pm = p_.data();
  for (std::size_t a = 0; a < m; ++a) pm[a * m + a] += q_;
  double upu = 0.0, e = y;
  for (std::size_t a = 0; a < m; ++a) {
    const double* row = pm + a * m;
    double v = 0.0;
    for (std::size_t b = 0; b < m; ++b) v += row[b] * u[b];
    pu_[a] = v;
    upu += u[a] * v;
    e -= u[a] * z_[a];
  }
  const double s = upu + r_;
  const double ks = e / s;
  for (std::size_t a = 0; a < m; ++a) {
    z_[a] = std::clamp(z_[a] + pu_[a] * ks, -options_.bound_sigma,
                       options_.bound_sigma);
    double* row = pm + a * m;
    const double ga = pu_[a] / s;
    for (std::size_t b = 0; b < m; ++b) row[b] -= ga * pu_[b];
  }
}

void Adapter::Update(models::Compensator& compensator, double time,
                     const double* row) {
  const std::size_t m = adapted_.size();
  AdaptUpdate update;
  update.time = time;
  for (std::size_t a = 0; a < m; ++a) {
    const std::size_t j = adapted_[a];
    theta_[j] = theta_fit_[j] + sigma_[a] * z_[a];
    if (std::abs(z_[a] - applied_z_[a]) > kMovedSigma) ++update.moved;
    if (std::abs(z_[a]) >= options_.bound_sigma) ++update.clipped;
    if (std::abs(z_[a]) > update.largest_sigma) {
      update.largest_sigma = std::abs(z_[a]);
      update.largest_name = names_[j];
    }
    applied_z_[a] = z_[a];
    summary_.change_sigma[j] = z_[a];
  }
  // Level continuity (header comment): the removed interference does not
  // jump at this sample.
  for (std::size_t a = 0; a < m; ++a) {
    const std::size_t j = adapted_[a];
    summary_.level_nT += row[j] * (theta_[j] - applied_theta_[j]);
  }
  applied_theta_ = theta_;
  compensator.SetCoefficients(theta_.data(), mean_ + summary_.level_nT);
  update.level_nT = summary_.level_nT;
  summary_.coefficients = theta_;
  summary_.largest_sigma =
      std::max(summary_.largest_sigma, update.largest_sigma);
  ++summary_.updates;
  update.samples_used = summary_.samples_used;
  since_update_ = 0;
  seen_since_update_ = 0;
  if (on_update_) on_update_(update);
}

std::string Adapter::FormatUpdate(const AdaptUpdate& u) {
  char buf[256];
  std::snprintf(buf, sizeof buf,
                "adapt t=%.3f s: %d moved, largest change %.2f sigma%s%s%s, "
                "%d clipped, %zu samples used, level %+.4f nT",
                u.time, u.moved, u.largest_sigma,
                u.largest_name.empty() ? "" : " (", u.largest_name.c_str(),
                u.largest_name.empty() ? "" : ")", u.clipped, u.samples_used,
                u.level_nT);
  return buf;
}

}  // namespace fluxtrim::core
