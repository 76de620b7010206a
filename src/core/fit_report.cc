#include "src/core/fit_report.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>

#include "src/core/cautions.h"

namespace fluxtrim::core {
namespace {

std::string Format(const char* format, double v) {
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, format, v);
  return buffer;
}

double CircularDistanceDeg(double a, double b) {
  double d = std::fmod(std::fabs(a - b), 360.0);
  return d > 180.0 ? 360.0 - d : d;
}

// Heading label in [0, 360): 359.7 shows as 0.
std::string HeadingLabel(double h) {
  double r = std::fmod(std::round(h), 360.0);
  if (r < 0) r += 360.0;
  return Format("%.0f", r);
}

std::string Pad(const std::string& s, std::size_t width) {
  return s.size() >= width ? s : std::string(width - s.size(), ' ') + s;
}

}  // namespace

proto::FitSummary SummaryFromFit(const FitResult& fit, const std::string& file,
                                 const std::string& model_file,
                                 const std::string& tool_version) {
  proto::FitSummary s;
  s.set_file(file);
  s.set_samples(static_cast<unsigned>(fit.samples));
  s.set_samples_used(static_cast<unsigned>(fit.samples_used));
  s.set_sample_rate_hz(fit.engine.sample_rate_hz);
  for (const auto& n : fit.term_names) s.add_terms(n);
  for (const FitCoefficient& c : fit.coefficients) {
    auto* out = s.add_coefficients();
    out->set_name(c.name);
    out->set_value(c.value);
    out->set_std_error(c.std_error);
    out->set_unit(c.unit);
    out->set_held(c.held);
    out->set_note(c.note);
  }
  s.set_fom_before_nt(fit.fom_before_nT);
  s.set_fom_after_nt(fit.fom_after_nT);
  s.set_improvement_ratio(fit.improvement_ratio);
  s.set_band_rms_before_nt(fit.band_rms_before_nT);
  s.set_band_rms_after_nt(fit.band_rms_after_nT);
  s.set_condition_number(fit.condition_number);
  s.set_lag_s(fit.lag_s);
  s.set_lag_std_error_s(fit.lag_std_error_s);
  s.set_lag_estimated(fit.lag_estimated);
  for (const ManeuverMetric& m : fit.maneuvers) {
    auto* out = s.add_maneuvers();
    out->set_heading_deg(m.maneuver.heading_deg);
    out->set_kind(ManeuverKindName(m.maneuver.kind));
    out->set_start_s(m.maneuver.start_s);
    out->set_end_s(m.maneuver.end_s);
    out->set_pp_before_nt(m.pp_before_nT);
    out->set_pp_after_nt(m.pp_after_nT);
  }
  for (const CrossValidationFold& f : fit.cross_validation) {
    auto* out = s.add_cross_validation();
    out->set_heading_deg(f.heading_deg);
    out->set_fom_nt(f.fom_nT);
    out->set_fom_before_nt(f.fom_before_nT);
    out->set_fom_full_fit_nt(f.fom_full_fit_nT);
    out->set_maneuvers(static_cast<unsigned>(f.maneuvers));
  }
  for (const auto& w : fit.warnings) s.add_warnings(w);
  s.set_field_source(fit.field_source);
  s.set_term_set(models::TermSetName(fit.engine.terms));
  s.set_derivative_half_width(fit.engine.half_width);
  s.set_band_low_hz(fit.band.low_hz);
  s.set_band_high_hz(fit.band.high_hz);
  s.set_filter_order(fit.band.order);
  s.set_ridge_lambda(fit.ridge_lambda);
  s.set_ridge_method(fit.ridge_method);
  s.set_loss(fit.loss);
  s.set_loss_scale_nt(fit.loss_scale_nT);
  s.set_residual_sigma_nt(fit.residual_sigma_nT);
  s.set_interference_mean_nt(fit.interference_mean_nT);
  s.set_maneuver_source(fit.maneuver_source);
  s.set_usable(fit.usable);
  s.set_message(fit.message);
  s.set_model_file(model_file);
  s.set_tool_version(tool_version);
  return s;
}

std::string FormatFitSummary(const FitResult& fit, const std::string& file) {
  std::ostringstream out;
  out << "fluxtrim fit: " << file << "\n";
  out << "  " << fit.samples << " samples at "
      << Format("%.3f", fit.engine.sample_rate_hz) << " Hz, "
      << fit.samples_used << " fitted; field from " << fit.field_source
      << "; terms " << models::TermSetName(fit.engine.terms) << " ("
      << fit.term_names.size() << "), derivative half-width "
      << fit.engine.half_width << "\n";
  out << "  band-pass " << Format("%.3f", fit.band.low_hz) << "-"
      << Format("%.3f", fit.band.high_hz) << " Hz, order " << fit.band.order
      << "; ridge " << Format("%.3g", fit.ridge_lambda) << " ("
      << fit.ridge_method << "); loss " << fit.loss << "\n";
  if (fit.lag_estimated) {
    out << "  lag of the scalar sensor " << Format("%+.4f", fit.lag_s)
        << " s +- " << Format("%.4f", fit.lag_std_error_s)
        << " (positive: it reads late)\n";
  } else {
    out << "  lag not estimated (0 s)\n";
  }

  if (!fit.maneuvers.empty()) {
    // Heading rows: cluster the maneuver headings within 30 deg.
    std::vector<double> headings;
    for (const auto& m : fit.maneuvers) {
      bool found = false;
      for (double h : headings) {
        if (CircularDistanceDeg(h, m.maneuver.heading_deg) <= 30.0) found = true;
      }
      if (!found) headings.push_back(m.maneuver.heading_deg);
    }
    std::sort(headings.begin(), headings.end(), [](double a, double b) {
      return std::fmod(std::fmod(std::round(a), 360.0) + 360.0, 360.0) <
             std::fmod(std::fmod(std::round(b), 360.0) + 360.0, 360.0);
    });
    out << "\n  peak-to-peak of the band-passed field, before -> after (nT)\n";
    const std::size_t width = 22;
    out << "  " << Pad("heading", 8) << Pad("pitch", width) << Pad("roll", width)
        << Pad("yaw", width) << "\n";
    for (double h : headings) {
      out << "  " << Pad(HeadingLabel(h), 8);
      for (ManeuverKind kind :
           {ManeuverKind::kPitch, ManeuverKind::kRoll, ManeuverKind::kYaw}) {
        double before = 0, after = 0;
        int count = 0;
        for (const auto& m : fit.maneuvers) {
          if (m.maneuver.kind != kind ||
              CircularDistanceDeg(h, m.maneuver.heading_deg) > 30.0 ||
              !std::isfinite(m.pp_before_nT)) {
            continue;
          }
          before += m.pp_before_nT;
          after += m.pp_after_nT;
          ++count;
        }
        out << Pad(count ? Format("%.3f", before) + " -> " + Format("%.3f", after)
                         : std::string("-"),
                   width);
      }
      out << "\n";
    }
    out << "  FOM " << Format("%.3f", fit.fom_before_nT) << " -> "
        << Format("%.3f", fit.fom_after_nT) << " nT";
    if (fit.fom_after_nT > 0) {
      out << " (" << Format("%.1f", fit.fom_before_nT / fit.fom_after_nT)
          << "x)";
    }
    out << "\n";
  }
  out << "  improvement ratio " << Format("%.2f", fit.improvement_ratio)
      << ", band RMS " << Format("%.4f", fit.band_rms_before_nT) << " -> "
      << Format("%.4f", fit.band_rms_after_nT) << " nT\n";
  out << "  condition number " << Format("%.3g", fit.condition_number)
      << " (equilibrated), residual sigma "
      << Format("%.4f", fit.residual_sigma_nT) << " nT\n";

  if (!fit.cross_validation.empty()) {
    out << "\n  cross-validation (each heading left out of the fit; FOM of "
           "its maneuvers, nT)\n";
    for (const auto& f : fit.cross_validation) {
      out << "  " << Pad(HeadingLabel(f.heading_deg), 8) << "  "
          << Format("%.3f", f.fom_nT) << " (full fit "
          << Format("%.3f", f.fom_full_fit_nT) << ", before "
          << Format("%.3f", f.fom_before_nT) << ")\n";
    }
  }

  out << "\n  coefficients\n";
  for (const auto& c : fit.coefficients) {
    out << "  " << Pad(c.name, 12) << "  " << Pad(Format("%.6g", c.value), 13)
        << " +- " << Format("%-10.3g", c.std_error) << " " << c.unit
        << (c.held ? "  (held)" : "") << "\n";
  }
  if (!fit.warnings.empty()) {
    out << "\n  warnings\n";
    for (const auto& w : fit.warnings) out << "  - " << w << "\n";
  }
  out << "\n" << kFlightCaution << "\n";
  return out.str();
}

}  // namespace fluxtrim::core
