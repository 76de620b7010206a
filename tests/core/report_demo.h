#pragma once
// Synthetic report data for the report tests: an invented compensation box
// flown by an invented contractor ("Halvard Aero-Survey", aircraft ZK-QFT,
// "Tarrin Downs" survey block). Shapes, not physics: the band-passed field
// before compensation follows the maneuvers, the field after is a small
// residual plus noise; numbers are of the size an operator sees (FOM of
// tens of nT before, about 1 nT after).

#include <cmath>
#include <cstdint>
#include <random>
#include <string>
#include <vector>

#include "src/core/report.h"

namespace fluxtrim::core::report_testing {

// Portable standard normal from a seeded 64-bit engine (Box-Muller).
class DemoNoise {
 public:
  explicit DemoNoise(std::uint64_t seed) : engine_(seed) {}
  double Uniform() {  // (0, 1)
    return (static_cast<double>(engine_() >> 11) + 0.5) * 0x1.0p-53;
  }
  double Normal() {
    const double u1 = Uniform(), u2 = Uniform();
    return std::sqrt(-2.0 * std::log(u1)) *
           std::cos(2.0 * 3.14159265358979323846 * u2);
  }

 private:
  std::mt19937_64 engine_;
};

inline ReportData DemoFitReportData() {
  constexpr double kPi = 3.14159265358979323846;
  constexpr double kRate = 10.0;
  constexpr double kDt = 1.0 / kRate;
  DemoNoise noise(20240611);
  ReportData d;
  d.command = "fit";
  d.input_file = "tarrin_box_2025-03-14.csv";
  d.model_file = "zk-qft_2025-03-14.ftmodel";
  d.recording_date = "2025-03-14";
  d.created = "2025-03-14 16:05 UTC";
  d.platform = "ZK-QFT, twin-engine survey aircraft, tail stinger";
  d.operator_name = "Halvard Aero-Survey (invented)";
  d.term_set = "default + aux i_gen";
  d.term_count = 19;
  d.band_low_hz = 0.1;
  d.band_high_hz = 0.9;
  d.sample_rate_hz = kRate;
  d.lag_s = 0.042;
  d.derivative_half_width = 2;
  d.extra_summary = {{"Residual std (band-passed)", "0.031 nT"},
                     {"Ridge", "auto (1.2e-3)"},
                     {"Loss", "Huber, 0.2 nT"}};
  d.warnings = {
      "Heading 270\xC2\xB0: yaw maneuver shorter than 3 cycles (2.4 < 3).",
      "Induced terms ind_xz & ind_yz: |value|/error < 2 (weakly determined)."};

  const double start_time = 36000.0;  // 10:00:00 UTC, seconds of day
  double t = start_time;
  double lat = -31.274, lon = 146.912, heading = 0.0;
  const double speed_m_s = 72.0;
  const char* const kKinds[3] = {"pitch", "roll", "yaw"};
  const double kHeadings[4] = {0.0, 90.0, 180.0, 270.0};
  const char* const kHeadingNames[4] = {"000\xC2\xB0", "090\xC2\xB0",
                                        "180\xC2\xB0", "270\xC2\xB0"};
  // Interference couplings per maneuver kind and heading, nT per degree.
  const double kCoupling[4][3] = {
      {1.10, 0.62, 0.45}, {0.85, 0.74, 0.38}, {1.25, 0.58, 0.52}, {0.92, 0.69, 0.41}};
  const double kPeriod[3] = {6.0, 8.0, 7.0};
  const double kAmplitude[3] = {5.0, 10.0, 5.0};

  auto advance = [&](double roll, double pitch, double hdg, double before,
                     double after, ReportPanel* panel) {
    d.time_s.push_back(t);
    d.roll_deg.push_back(roll);
    d.pitch_deg.push_back(pitch);
    d.heading_deg.push_back(std::fmod(hdg + 360.0, 360.0));
    d.lat_deg.push_back(lat);
    d.lon_deg.push_back(lon);
    const double drift = 3.0 * std::sin(2 * kPi * (t - start_time) / 900.0);
    const double earth = 57120.0 + drift + 0.02 * noise.Normal();
    d.spectrum_before.push_back(earth + before);
    d.spectrum_after.push_back(earth + after);
    if (panel != nullptr) {
      panel->time_s.push_back(t);
      panel->before.push_back(before);
      panel->after.push_back(after);
    }
    const double h = hdg * kPi / 180.0;
    lat += speed_m_s * std::cos(h) * kDt / 111320.0;
    lon += speed_m_s * std::sin(h) * kDt / (111320.0 * std::cos(lat * kPi / 180.0));
    t += kDt;
  };

  for (int hi = 0; hi < 4; ++hi) {
    ReportPanel panel;
    panel.title = "Heading " + std::string(kHeadingNames[hi]);
    // Turn onto the heading (standard-rate turn of 3 deg/s, 25 deg bank).
    const double target = kHeadings[hi];
    if (hi > 0) {
      while (std::fabs(target - heading) > 1e-9) {
        const double step = std::min(0.3, target - heading);
        heading += step;
        advance(25.0, 0.0, heading, 0.0, 0.0, nullptr);
      }
    }
    for (int s = 0; s < 100; ++s) {  // settle, 10 s
      advance(0.3 * noise.Normal(), 0.2 * noise.Normal(), heading,
              0.15 * noise.Normal(), 0.02 * noise.Normal(), &panel);
    }
    for (int k = 0; k < 3; ++k) {
      const double t0 = t;
      double lo_b = 1e9, hi_b = -1e9, lo_a = 1e9, hi_a = -1e9;
      const int samples = static_cast<int>(3.0 * kPeriod[k] * kRate);
      for (int s = 0; s < samples; ++s) {
        const double phase = 2 * kPi * s / (kPeriod[k] * kRate);
        const double angle = kAmplitude[k] * std::sin(phase);
        const double before = kCoupling[hi][k] * angle +
                              0.4 * std::sin(2.1 * phase) + 0.08 * noise.Normal();
        const double after = 0.012 * angle + 0.03 * noise.Normal();
        lo_b = std::min(lo_b, before);
        hi_b = std::max(hi_b, before);
        lo_a = std::min(lo_a, after);
        hi_a = std::max(hi_a, after);
        advance(k == 1 ? angle : 0.3 * noise.Normal(),
                k == 0 ? angle : 0.2 * noise.Normal(),
                heading + (k == 2 ? angle : 0.0), before, after, &panel);
      }
      panel.spans.push_back({t0, t, kKinds[k]});
      d.maneuvers.push_back({kHeadingNames[hi], kKinds[k], hi_b - lo_b, hi_a - lo_a});
      for (int s = 0; s < 60; ++s) {  // settle between maneuvers, 6 s
        advance(0.3 * noise.Normal(), 0.2 * noise.Normal(), heading,
                0.15 * noise.Normal(), 0.02 * noise.Normal(), &panel);
      }
    }
    d.panels.push_back(std::move(panel));
  }
  d.duration_s = t - start_time;
  d.fom_before_nT = 0.0;
  d.fom_after_nT = 0.0;
  for (const auto& m : d.maneuvers) {
    d.fom_before_nT += m.p2p_before;
    d.fom_after_nT += m.p2p_after;
  }
  d.improvement_ratio = 31.4;
  // Held-out FOM is a little worse than under the full fit, as it should.
  d.cross_validation = {{"000\xC2\xB0", 1.12}, {"090\xC2\xB0", 0.97},
                        {"180\xC2\xB0", 1.25}, {"270\xC2\xB0", 1.08}};

  const std::vector<std::pair<std::string, double>> values = {
      {"perm_x", 41.7},      {"perm_y", -12.3},     {"perm_z", 66.2},
      {"ind_xx", 2.1e-4},    {"ind_xy", -4.6e-5},   {"ind_xz", 1.2e-5},
      {"ind_yy", 1.37e-4},   {"ind_yz", -8.0e-6},   {"eddy_xx", 3.1e-6},
      {"eddy_xy", -1.2e-6},  {"eddy_xz", 6.4e-6},   {"eddy_yx", 0.9e-6},
      {"eddy_yy", 2.2e-6},   {"eddy_yz", -2.8e-6},  {"eddy_zx", 4.4e-6},
      {"eddy_zy", -0.7e-6},  {"aux_i_gen_x", 0.41}, {"aux_i_gen_y", -0.12},
      {"aux_i_gen_z", 0.27}};
  for (const auto& [name, v] : values) {
    const double rel = name.rfind("ind_xz", 0) == 0 || name.rfind("ind_yz", 0) == 0
                           ? 0.7
                           : 0.06 + 0.04 * noise.Uniform();
    d.coefficients.push_back({name, v, std::fabs(v) * rel + 1e-9});
  }
  d.excitation = {{"permanent", {118.0, 74.0, 21.0}},
                  {"induced", {96.0, 41.0, 12.5, 3.1, 0.42}},
                  {"eddy", {34.0, 22.0, 9.1, 5.6, 1.8, 0.9, 0.31, 0.044}},
                  {"aux", {15.2, 6.1, 2.2}}};
  return d;
}

// An apply job on two survey lines: no maneuvers, no excitation.
inline ReportData DemoApplyReportData() {
  ReportData fit = DemoFitReportData();
  ReportData d;
  d.command = "apply";
  d.input_file = "tarrin_lines_2025-03-14.csv";
  d.model_file = fit.model_file;
  d.recording_date = fit.recording_date;
  d.created = fit.created;
  d.platform = fit.platform;
  d.term_set = fit.term_set;
  d.term_count = fit.term_count;
  d.band_low_hz = fit.band_low_hz;
  d.band_high_hz = fit.band_high_hz;
  d.sample_rate_hz = fit.sample_rate_hz;
  d.lag_s = fit.lag_s;
  d.derivative_half_width = 2;
  d.coefficients = fit.coefficients;
  d.improvement_ratio = 19.0;  // std before / after of the panels below
  DemoNoise noise(77);
  const double kPi = 3.14159265358979323846;
  for (int line = 0; line < 2; ++line) {
    ReportPanel p;
    p.title = "Line " + std::to_string(1010 + 10 * line);
    const double t0 = 40000.0 + 900.0 * line;
    for (int i = 0; i < 3000; ++i) {
      const double t = t0 + 0.1 * i;
      const double turb = 1.5 * std::sin(2 * kPi * 0.31 * t) + 0.7 * noise.Normal();
      p.time_s.push_back(t);
      p.before.push_back(turb);
      p.after.push_back(0.05 * turb + 0.02 * noise.Normal());
      d.time_s.push_back(t);
      d.roll_deg.push_back(2.0 * std::sin(2 * kPi * 0.1 * t));
      d.pitch_deg.push_back(1.0 * std::sin(2 * kPi * 0.07 * t));
      d.heading_deg.push_back(line == 0 ? 45.0 : 225.0);
      d.lat_deg.push_back(-31.30 + (line == 0 ? 1 : -1) * 1e-5 * i + 0.01 * line);
      d.lon_deg.push_back(146.90 + (line == 0 ? 1 : -1) * 1.2e-5 * i);
      d.spectrum_before.push_back(57100.0 + turb);
      d.spectrum_after.push_back(57100.0 + p.after.back());
    }
    d.panels.push_back(std::move(p));
  }
  d.duration_s = 600.0;
  return d;
}

}  // namespace fluxtrim::core::report_testing
