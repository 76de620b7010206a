#pragma once
// The compensation report: one self-contained HTML page (inline CSS and
// inline SVG only; no scripts, no fonts, images or links to fetch) that
// opens offline in any browser and prints on A4. `fit` and `apply` fill a
// ReportData and call BuildReport / WriteReport.
//
// Every plot is an <svg class="plot"> with a fixed id (see ReportPlotIds):
//   plot-field-<i>           band-passed field before/after, panel i (0-based)
//   plot-maneuvers           per-maneuver peak-to-peak before/after
//   plot-coef-permanent      coefficients with error bars, one plot per
//   plot-coef-induced        term group present in `coefficients`
//   plot-coef-eddy
//   plot-coef-aux
//   plot-excitation          singular values per term group (log axis)
//   plot-spectrum            amplitude spectral density before/after
//   plot-attitude            roll and pitch vs time
//   plot-heading             heading vs time
//   plot-track               lon/lat track, equal aspect
// A section whose data is empty is left out (with a short note), so an
// apply report without maneuvers has no plot-maneuvers.
//
// Filling it, e.g. in a fit command (every field is optional; leave what
// you do not have empty or NaN):
//
//   core::ReportData r;
//   r.command = "fit";
//   r.input_file = path;
//   r.sample_rate_hz = rate;  r.fom_before_nT = ...;  r.fom_after_nT = ...;
//   for (each heading h) {
//     core::ReportPanel p;  p.title = "Heading 090°";
//     p.time_s = ...;  p.before = ...;  p.after = ...;   // band-passed, nT
//     for (each maneuver m of h) p.spans.push_back({m.start_s, m.end_s, "roll"});
//     r.panels.push_back(std::move(p));
//   }
//   r.maneuvers.push_back({"090°", "roll", p2p_before, p2p_after});
//   r.coefficients.push_back({"perm_x", value, std_error});
//   r.spectrum_before = f;  r.spectrum_after = f_comp;  // raw total field
//   r.time_s = t;  r.roll_deg = ...;  r.lat_deg = ...;  r.lon_deg = ...;
//   core::WriteReport(report_path, r);
//
// Units: times in seconds (any origin: plots show time since `time_origin_s`,
// default the earliest time in the data); fields in nT; angles in degrees;
// coefficients in their physical units (permanent nT, induced 1, eddy s,
// aux nT per channel unit). NaN marks a value that is not available; it is
// printed as "n/a" and never reaches the page as "nan".

#include <limits>
#include <string>
#include <utility>
#include <vector>

#include "src/core/spectrum.h"

namespace fluxtrim::core {

// A shaded interval on a time panel, e.g. one maneuver.
struct ReportSpan {
  double start_s = 0.0;
  double end_s = 0.0;
  std::string label;  // "pitch", "roll", "yaw", or any short text
};

// The report's palette (hex RGB), used by every plot: "before" is always
// terracotta and "after" always deep blue. Public so tests can look for
// these colours in a rendered page.
inline constexpr const char* kReportColourBefore = "#c8553d";
inline constexpr const char* kReportColourAfter = "#1b4965";
// before - after on survey-line panels (the interference removed).
inline constexpr const char* kReportColourRemoved = "#7b8794";
inline constexpr const char* kReportColourPermanent = "#1b4965";
inline constexpr const char* kReportColourInduced = "#5a8f29";
inline constexpr const char* kReportColourEddy = "#8e4585";
inline constexpr const char* kReportColourAux = "#b0703c";
inline constexpr const char* kReportColourRoll = "#3d7ea6";
inline constexpr const char* kReportColourPitch = "#d8903a";
inline constexpr const char* kReportColourHeading = "#4f5d75";
inline constexpr const char* kReportColourTrack = "#4f5d75";
inline constexpr const char* kReportColourStart = "#2f855a";
inline constexpr const char* kReportColourEnd = "#9b2c2c";

// One time panel of band-passed total field before and after compensation:
// one per heading for a calibration box (spans = its maneuvers), or one per
// survey line or time window for apply. A panel without spans also shows
// the difference before - after (the interference removed), which on
// survey lines is otherwise hidden under two nearly equal traces.
struct ReportPanel {
  std::string title;            // "Heading 000°", "Line 1010", ...
  std::vector<double> time_s;   // sample times
  std::vector<double> before;   // band-passed field before compensation, nT
  std::vector<double> after;    // band-passed field after compensation, nT
  std::vector<ReportSpan> spans;
};

// Peak-to-peak of the band-passed field over one maneuver (FOM term).
struct ReportManeuver {
  std::string heading;  // e.g. "000°" or "N"; maneuvers are grouped by it
  std::string kind;     // "pitch", "roll" or "yaw"
  double p2p_before = std::numeric_limits<double>::quiet_NaN();  // nT
  double p2p_after = std::numeric_limits<double>::quiet_NaN();   // nT
};

// One fitted coefficient. The term group (permanent, induced, eddy, aux)
// comes from the name prefix: perm_, ind_, eddy_, aux_ (tolles_lawson.h).
struct ReportCoefficient {
  std::string name;
  double value = std::numeric_limits<double>::quiet_NaN();
  double std_error = std::numeric_limits<double>::quiet_NaN();  // 1 sigma
};

// Excitation of one term group: singular values of the band-passed term
// matrix restricted to the group's columns, largest first, in the columns'
// units (nT for permanent, induced and aux columns after the Bt scaling of
// tolles_lawson.h; nT/s for eddy), e.g. divided by sqrt(samples) so they
// read as RMS. Small values relative to the largest mark directions the
// maneuvers did not excite.
struct ReportExcitation {
  std::string group;  // "permanent", "induced", "eddy", "aux" or free text
  std::vector<double> singular_values;
};

// Leave-one-heading-out check or any other per-heading figure.
struct ReportCrossValidation {
  std::string heading;
  double fom_nT = std::numeric_limits<double>::quiet_NaN();
};

struct ReportData {
  static constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

  // Job summary.
  std::string command = "fit";  // "fit" or "apply"
  std::string input_file;
  std::string model_file;       // written by fit, read by apply
  std::string recording_date;   // ISO 8601 date of the flight
  std::string created;          // when the report was made; "" = now (UTC)
  std::string platform;         // aircraft / drone / vehicle
  std::string operator_name;    // contractor, optional
  std::string term_set;         // e.g. "default", "full", "permanent,induced"
  int term_count = 0;
  double band_low_hz = kNaN;    // fit band-pass
  double band_high_hz = kNaN;
  double sample_rate_hz = kNaN;
  double duration_s = kNaN;
  double lag_s = kNaN;          // scalar sensor lag (positive: f is late)
  int derivative_half_width = -1;  // k samples; stream latency = k samples
  double fom_before_nT = kNaN;
  double fom_after_nT = kNaN;
  double improvement_ratio = kNaN;  // std before / std after, band-passed
  // Any further figures worth a line: {"residual std (nT)", "0.04"}.
  std::vector<std::pair<std::string, std::string>> extra_summary;

  std::vector<ReportPanel> panels;
  std::vector<ReportManeuver> maneuvers;
  std::vector<ReportCrossValidation> cross_validation;
  std::vector<ReportCoefficient> coefficients;
  std::vector<ReportExcitation> excitation;

  // Total field before and after compensation (not band-passed; NaN
  // samples allowed), sampled at sample_rate_hz, for the spectrum.
  std::vector<double> spectrum_before;
  std::vector<double> spectrum_after;

  // Attitude and track (any may be empty; equal lengths with time_s).
  std::vector<double> time_s;
  std::vector<double> roll_deg;
  std::vector<double> pitch_deg;
  std::vector<double> heading_deg;  // 0..360, true north
  std::vector<double> lat_deg;
  std::vector<double> lon_deg;
  double time_origin_s = kNaN;  // NaN = the earliest time found

  std::vector<std::string> warnings;
  bool ordnance_search = false;  // adds kOrdnanceCaution (vehicle UXO work)
};

struct ReportOptions {
  std::string title;  // "" = from the command ("Compensation fit report")
  std::size_t max_points_per_line = 1600;  // decimation budget per series
  SpectrumOptions spectrum;  // sample_rate_hz is taken from the data
  // Overrides spectrum.fill_gaps_up_to: dropouts of up to this many samples
  // are bridged for the spectrum only (plots show the gaps as gaps).
  std::size_t spectrum_fill_gaps_up_to = 3;
};

// The whole HTML document.
std::string BuildReport(const ReportData& data, const ReportOptions& options = {});

// Writes BuildReport to `path`; throws std::runtime_error naming the path
// when it cannot be written.
void WriteReport(const std::string& path, const ReportData& data,
                 const ReportOptions& options = {});

// Ids of the plots BuildReport draws for `data`, in page order.
std::vector<std::string> ReportPlotIds(const ReportData& data);

// Term group of a coefficient name: "permanent", "induced", "eddy", "aux",
// or "other".
std::string TermGroupOf(const std::string& coefficient_name);

}  // namespace fluxtrim::core
