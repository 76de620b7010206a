#include "src/core/inspect.h"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <sstream>
#include <vector>

#include "io/error.h"
#include "models/wmm.h"
#include "src/core/butterworth.h"
#include "src/core/maneuvers.h"

namespace fluxtrim::core {
namespace {

double Median(std::vector<double> v) {
  if (v.empty()) return std::numeric_limits<double>::quiet_NaN();
  const std::size_t mid = v.size() / 2;
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(mid),
                   v.end());
  return v[mid];
}

double Percentile(std::vector<double> v, double p) {
  if (v.empty()) return std::numeric_limits<double>::quiet_NaN();
  const auto k = static_cast<std::size_t>(
      std::clamp(p / 100.0 * static_cast<double>(v.size() - 1), 0.0,
                 static_cast<double>(v.size() - 1)));
  std::nth_element(v.begin(), v.begin() + static_cast<std::ptrdiff_t>(k),
                   v.end());
  return v[k];
}

void AddFieldSanity(const std::vector<double>& magnitude,
                    const std::string& source, const InspectOptions& options,
                    proto::InspectSummary* summary) {
  std::vector<double> finite;
  finite.reserve(magnitude.size());
  for (double m : magnitude) {
    if (std::isfinite(m)) finite.push_back(m);
  }
  if (finite.empty()) return;
  proto::FieldSanity* field = summary->add_field();
  field->set_source(source);
  const auto [lo, hi] = std::minmax_element(finite.begin(), finite.end());
  field->set_min_nt(*lo);
  field->set_max_nt(*hi);
  field->set_median_nt(Median(finite));
  const bool plausible =
      *lo >= options.min_plausible_nT && *hi <= options.max_plausible_nT;
  field->set_plausible(plausible);
  if (!plausible) {
    char note[256];
    std::snprintf(note, sizeof note,
                  "%s field magnitude %.0f-%.0f nT is outside %.0f-%.0f nT: "
                  "probable unit or scaling problem (Earth's main field spans "
                  "about 22,000-67,000 nT at the surface, WMM2025)",
                  source.c_str(), *lo, *hi, options.min_plausible_nT,
                  options.max_plausible_nT);
    field->set_note(note);
    summary->add_warnings(note);
  }
}

void AddManeuversAndExcitation(const io::Table& recording,
                               const std::string& file,
                               const InspectOptions& options,
                               proto::InspectSummary* summary) {
  try {
    const ManeuverDetection detection = DetectManeuvers(recording);
    summary->set_maneuver_source(detection.source);
    for (const Maneuver& m : detection.maneuvers) {
      proto::DetectedManeuver* out = summary->add_maneuvers();
      out->set_heading_deg(m.heading_deg);
      out->set_kind(ManeuverKindName(m.kind));
      out->set_start_s(m.start_s);
      out->set_end_s(m.end_s);
    }
    for (const std::string& note : detection.notes)
      summary->add_maneuver_notes(note);
    if (detection.maneuvers.empty()) {
      summary->add_warnings(
          "no pitch, roll or yaw maneuvers found (source: " + detection.source +
          "): fit needs a compensation box or --segments FILE");
    } else if (detection.maneuvers.size() < 12) {
      summary->add_warnings("found " +
                            std::to_string(detection.maneuvers.size()) +
                            " of the 12 maneuvers of a full box (pitch, roll, "
                            "yaw at four headings)");
    }
  } catch (const std::invalid_argument& e) {
    summary->add_maneuver_notes(std::string("maneuver detection skipped: ") +
                                e.what());
  }

  ExcitationOptions excitation = options.excitation;
  excitation.source = file;
  summary->set_term_set(models::TermSetName(excitation.terms));
  ExcitationSummary ex;
  try {
    ex = AnalyseExcitation(recording, excitation);
  } catch (const std::invalid_argument& e) {
    summary->set_excitation_note(std::string("excitation check skipped: ") +
                                 e.what());
    return;
  } catch (const io::InputError& e) {
    summary->set_excitation_note(std::string("excitation check skipped: ") +
                                 e.what());
    return;
  }
  summary->set_field_source(ex.field_source);
  try {
    const BandPass band(excitation.band, ex.sample_rate_hz);
    summary->set_band_low_hz(band.low_hz());
    summary->set_band_high_hz(band.high_hz());
  } catch (const std::invalid_argument&) {
  }
  if (!ex.usable) {
    summary->set_excitation_note("excitation check skipped: " + ex.message);
    summary->add_warnings(ex.message);
    return;
  }
  summary->set_excitation_rows(static_cast<std::uint32_t>(ex.rows));
  summary->set_excitation_residual_nt(ex.residual_rms_nT);
  for (const GroupExcitation& g : ex.groups) {
    proto::GroupExcitation* out = summary->add_excitation();
    out->set_group(g.group);
    out->set_column_unit(g.column_unit);
    for (double v : g.singular_values) out->add_singular_values(v);
    for (const std::string& t : g.undetermined_terms)
      out->add_undetermined_terms(t);
    for (const TermExcitation& t : ex.terms) {
      if (t.group != g.group) continue;
      proto::TermExcitation* term = out->add_terms();
      term->set_name(t.name);
      term->set_unit(t.unit);
      term->set_band_rms(t.band_rms);
      term->set_independent_rms(t.independent_rms);
      term->set_std_error(t.std_error);
      term->set_plausible_bound(t.plausible_bound);
      term->set_determined(t.determined);
      term->set_reason(t.reason);
    }
  }
  const std::vector<std::string> undetermined = ex.UndeterminedTerms();
  if (!undetermined.empty()) {
    std::string list;
    bool physical = false, aux = false;
    for (const std::string& t : undetermined) {
      list += (list.empty() ? "" : ", ") + t;
      (t.rfind("aux_", 0) == 0 ? aux : physical) = true;
    }
    std::string hint;
    if (physical) hint = "fly pitch, roll and yaw at each of four headings";
    if (aux) {
      hint += std::string(hint.empty() ? "" : "; ") +
              "vary the aux channels during the maneuvers";
    }
    summary->add_warnings(std::to_string(undetermined.size()) +
                          " term(s) not determined by this recording: " + list +
                          "; a fit holds them at 0 (" + hint + ")");
  }
}

}  // namespace

proto::InspectSummary Inspect(const io::Table& recording,
                              const std::string& file,
                              const InspectOptions& options) {
  proto::InspectSummary summary;
  summary.set_file(file);
  const std::size_t n = recording.rows();
  summary.set_samples(static_cast<std::uint32_t>(n));

  for (const io::Channel& c : recording.channels()) {
    proto::ChannelStats* stats = summary.add_channels();
    stats->set_name(c.info.name);
    stats->set_unit(c.info.unit);
    double lo = std::numeric_limits<double>::infinity(), hi = -lo, sum = 0;
    std::uint32_t missing = 0, count = 0;
    for (double v : c.values) {
      if (!std::isfinite(v)) {
        ++missing;
        continue;
      }
      lo = std::min(lo, v);
      hi = std::max(hi, v);
      sum += v;
      ++count;
    }
    const double nan = std::numeric_limits<double>::quiet_NaN();
    stats->set_min(count ? lo : nan);
    stats->set_max(count ? hi : nan);
    stats->set_mean(count ? sum / count : nan);
    stats->set_missing(missing);
  }

  const std::vector<double>& t = recording.Column(recording.time_channel());
  std::vector<double> steps;
  steps.reserve(n);
  std::uint32_t backward = 0, duplicate = 0;
  for (std::size_t i = 1; i < n; ++i) {
    const double dt = t[i] - t[i - 1];
    if (!std::isfinite(dt)) continue;
    if (dt < 0) ++backward;
    if (dt == 0) ++duplicate;
    if (dt > 0) steps.push_back(dt);
  }
  summary.set_backward_steps(backward);
  summary.set_duplicate_times(duplicate);
  if (backward > 0) {
    summary.add_warnings(std::to_string(backward) +
                         " time steps go backwards: sort or split the file");
  }
  if (duplicate > 0) {
    summary.add_warnings(std::to_string(duplicate) +
                         " samples repeat the time of the previous sample");
  }
  if (n >= 2) summary.set_duration_s(t[n - 1] - t[0]);
  if (!steps.empty()) {
    const double median = Median(steps);
    summary.set_median_step_s(median);
    summary.set_sample_rate_hz(1.0 / median);
    const auto [lo, hi] = std::minmax_element(steps.begin(), steps.end());
    summary.set_min_step_s(*lo);
    summary.set_max_step_s(*hi);
    summary.set_step_spread_pct(
        100.0 * (Percentile(steps, 99) - Percentile(steps, 1)) / median);
    double gap_total = 0, longest = 0;
    std::uint32_t gaps = 0;
    for (std::size_t i = 1; i < n; ++i) {
      const double dt = t[i] - t[i - 1];
      if (!(dt > options.gap_factor * median)) continue;
      ++gaps;
      gap_total += dt;
      longest = std::max(longest, dt);
      if (summary.gaps_size() < 100) {
        proto::TimeGap* gap = summary.add_gaps();
        gap->set_start_s(t[i - 1]);
        gap->set_length_s(dt);
        gap->set_missing_samples(
            static_cast<std::uint32_t>(std::lround(dt / median)) - 1);
      }
    }
    summary.set_gap_count(gaps);
    summary.set_gap_total_s(gap_total);
    summary.set_longest_gap_s(longest);
  }

  const bool has_fluxgate =
      recording.Has("bx") && recording.Has("by") && recording.Has("bz");
  std::vector<double> magnitude;
  if (has_fluxgate) {
    const auto& bx = recording.Column("bx");
    const auto& by = recording.Column("by");
    const auto& bz = recording.Column("bz");
    magnitude.resize(n);
    for (std::size_t i = 0; i < n; ++i) {
      magnitude[i] = std::sqrt(bx[i] * bx[i] + by[i] * by[i] + bz[i] * bz[i]);
    }
    AddFieldSanity(magnitude, "fluxgate", options, &summary);
  }
  if (recording.Has("f")) {
    AddFieldSanity(recording.Column("f"), "scalar", options, &summary);
  }

  if (std::isfinite(options.decimal_year) && recording.Has("lat") &&
      recording.Has("lon")) {
    std::vector<double> lat, lon, alt;
    for (std::size_t i = 0; i < n; ++i) {
      if (std::isfinite(recording.Column("lat")[i]) &&
          std::isfinite(recording.Column("lon")[i])) {
        lat.push_back(recording.Column("lat")[i]);
        lon.push_back(recording.Column("lon")[i]);
        alt.push_back(recording.Has("alt") ? recording.Column("alt")[i] : 0.0);
      }
    }
    if (!lat.empty()) {
      proto::WmmComparison* wmm = summary.mutable_wmm();
      wmm->set_decimal_year(options.decimal_year);
      wmm->set_lat_deg(Median(lat));
      wmm->set_lon_deg(Median(lon));
      wmm->set_alt_m(Median(alt));
      const models::MagneticModel& model = models::MagneticModel::Wmm2025();
      const models::GeomagneticField field = model.Field(
          wmm->lat_deg(), wmm->lon_deg(), wmm->alt_m(), options.decimal_year);
      wmm->set_wmm_f_nt(field.f_nT);
      wmm->set_wmm_incl_deg(field.incl_deg);
      const std::vector<double>& measured =
          recording.Has("f") ? recording.Column("f") : magnitude;
      std::vector<double> finite;
      for (double m : measured) {
        if (std::isfinite(m)) finite.push_back(m);
      }
      if (!finite.empty()) {
        const double median = Median(finite);
        wmm->set_measured_median_f_nt(median);
        wmm->set_difference_nt(median - field.f_nT);
        // A platform, local geology and the survey's altitude move the
        // reading by at most a few thousand nT; more is a unit, axis or
        // place/date problem (common practice).
        if (std::abs(median - field.f_nT) > 5000.0) {
          std::ostringstream note;
          note << "measured field " << std::lround(median) << " nT differs by "
               << std::lround(median - field.f_nT) << " nT from WMM2025 ("
               << std::lround(field.f_nT)
               << " nT) at this place and date: check units, axes and the date";
          wmm->set_note(note.str());
          summary.add_warnings(note.str());
        }
      }
      if (!model.IsValidDate(options.decimal_year)) {
        summary.add_warnings(
            "date is outside the WMM2025 validity 2025.0-2030.0");
      }
    }
  }
  if (options.maneuvers && has_fluxgate)
    AddManeuversAndExcitation(recording, file, options, &summary);
  return summary;
}

std::string FormatInspectSummary(const proto::InspectSummary& s) {
  std::ostringstream out;
  char line[512];
  out << "Recording " << s.file() << "\n";
  std::snprintf(line, sizeof line,
                "  samples %u, duration %.1f s, rate %.4g Hz (median step %.6g "
                "s, step spread %.3g %%, min %.6g s, max %.6g s)\n",
                s.samples(), s.duration_s(), s.sample_rate_hz(),
                s.median_step_s(), s.step_spread_pct(), s.min_step_s(),
                s.max_step_s());
  out << line;
  std::snprintf(line, sizeof line,
                "  gaps %u (total %.3g s, longest %.3g s); backward steps %u; "
                "duplicate times %u\n",
                s.gap_count(), s.gap_total_s(), s.longest_gap_s(),
                s.backward_steps(), s.duplicate_times());
  out << line;
  out << "Channels\n";
  std::snprintf(line, sizeof line, "  %-16s %-6s %16s %16s %10s\n", "name",
                "unit", "min", "max", "missing");
  out << line;
  for (const proto::ChannelStats& c : s.channels()) {
    std::snprintf(line, sizeof line, "  %-16s %-6s %16.6g %16.6g %10u\n",
                  c.name().c_str(), c.unit().c_str(), c.min(), c.max(),
                  c.missing());
    out << line;
  }
  for (const proto::FieldSanity& f : s.field()) {
    std::snprintf(line, sizeof line,
                  "Field magnitude (%s): %.1f-%.1f nT, median %.1f nT: %s\n",
                  f.source().c_str(), f.min_nt(), f.max_nt(), f.median_nt(),
                  f.plausible() ? "plausible" : "IMPLAUSIBLE");
    out << line;
  }
  if (s.has_wmm()) {
    const proto::WmmComparison& w = s.wmm();
    std::snprintf(line, sizeof line,
                  "WMM2025 at %.4f, %.4f, %.0f m, %.3f: F %.1f nT, inclination "
                  "%.2f deg; measured median %.1f nT (%+.1f nT)\n",
                  w.lat_deg(), w.lon_deg(), w.alt_m(), w.decimal_year(),
                  w.wmm_f_nt(), w.wmm_incl_deg(), w.measured_median_f_nt(),
                  w.difference_nt());
    out << line;
  }
  if (!s.maneuver_source().empty() || s.maneuvers_size() > 0) {
    out << "Maneuvers (" << s.maneuvers_size() << ", from "
        << s.maneuver_source() << ")\n";
    for (const proto::DetectedManeuver& m : s.maneuvers()) {
      std::snprintf(line, sizeof line,
                    "  heading %5.1f deg  %-5s  %9.2f - %9.2f s  (%.0f s)\n",
                    m.heading_deg(), m.kind().c_str(), m.start_s(), m.end_s(),
                    m.end_s() - m.start_s());
      out << line;
    }
  }
  for (const std::string& note : s.maneuver_notes())
    out << "  note: " << note << "\n";
  if (s.excitation_size() > 0) {
    std::snprintf(line, sizeof line,
                  "Excitation (terms %s, field %s, band %.3g-%.3g Hz, %u "
                  "samples; residual of a plain least-squares fit %.3g nT "
                  "RMS)\n",
                  s.term_set().c_str(), s.field_source().c_str(),
                  s.band_low_hz(), s.band_high_hz(), s.excitation_rows(),
                  s.excitation_residual_nt());
    out << line;
    out << "  singular values of the band-passed term columns per group "
           "(RMS, column unit)\n";
    for (const proto::GroupExcitation& g : s.excitation()) {
      std::snprintf(line, sizeof line, "  %-10s [%s]", g.group().c_str(),
                    g.column_unit().c_str());
      out << line;
      for (double v : g.singular_values()) {
        std::snprintf(line, sizeof line, " %.3g", v);
        out << line;
      }
      out << "\n";
    }
    std::snprintf(line, sizeof line, "  %-10s %12s %12s %12s  %s\n", "term",
                  "band RMS", "independent", "std error", "");
    out << line;
    for (const proto::GroupExcitation& g : s.excitation()) {
      for (const proto::TermExcitation& t : g.terms()) {
        if (t.determined()) {
          std::snprintf(line, sizeof line, "  %-10s %12.3g %12.3g %12.3g  %s\n",
                        t.name().c_str(), t.band_rms(), t.independent_rms(),
                        t.std_error(), t.unit().c_str());
        } else {
          std::snprintf(line, sizeof line,
                        "  %-10s %12.3g %12s %12s  NOT DETERMINED: %s\n",
                        t.name().c_str(), t.band_rms(), "-", "-",
                        t.reason().c_str());
        }
        out << line;
      }
    }
    bool any = false;
    for (const proto::GroupExcitation& g : s.excitation()) {
      if (g.undetermined_terms_size() == 0) continue;
      if (!any) out << "  not determined by this recording:";
      any = true;
      for (const std::string& t : g.undetermined_terms()) out << " " << t;
    }
    out << (any ? "\n" : "  every term is determined by this recording\n");
  }
  if (!s.excitation_note().empty()) out << s.excitation_note() << "\n";
  for (const std::string& w : s.warnings()) out << "warning: " << w << "\n";
  return out.str();
}

}  // namespace fluxtrim::core
