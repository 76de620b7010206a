#pragma once
// Inputs for the apply / stream / runtime benchmarks, generated on the fly
// (nothing big is committed): a 10 Hz survey recording of an aircraft
// flying lines with gentle attitude changes, logged with the digits a logger
// writes, and a 16-term Tolles-Lawson model with coefficients of the sizes
// a compensation flight gives. Header-only so that every benchmark
// executable (one per file) can use it.
//
// Channels: time (s), bx by bz (nT, body frame), f (nT), roll pitch heading
// (deg), lat lon (deg), alt (m), then aux_0, aux_1, ... (A) when asked.

#include <cmath>
#include <cstddef>
#include <string>
#include <vector>

#include "io/model_file.h"
#include "io/table.h"
#include "models/tolles_lawson.h"
#include "proto/model.pb.h"

namespace fluxtrim::perf {

inline constexpr double kRateHz = 10.0;
inline constexpr double kPi = 3.14159265358979323846;
inline constexpr double kDeg = kPi / 180.0;

inline double Round(double v, double step) {
  return std::round(v / step) * step;
}

inline std::vector<io::ChannelInfo> SurveySchema(std::size_t aux_count) {
  std::vector<io::ChannelInfo> schema = {
      {"time", "s", ""},     {"bx", "nT", ""},   {"by", "nT", ""},
      {"bz", "nT", ""},      {"f", "nT", ""},    {"roll", "deg", ""},
      {"pitch", "deg", ""},  {"heading", "deg", ""}, {"lat", "deg", ""},
      {"lon", "deg", ""},    {"alt", "m", ""}};
  for (std::size_t a = 0; a < aux_count; ++a) {
    schema.push_back({"aux_" + std::to_string(a), "A", ""});
  }
  return schema;
}

// Rows [begin, begin + rows) of an endless survey at 10 Hz. The Earth field
// (invented mid-latitude values, NED: 18 200, -2 300, 47 800 nT) is rotated
// into the body frame by the attitude (3-2-1 heading, pitch, roll), so the
// fluxgate changes direction as a real one does; f is its magnitude plus a
// slow anomaly. Values are rounded to logger digits (0.01 nT, 0.01 deg).
inline io::Table SurveyChunk(std::size_t begin, std::size_t rows,
                             std::size_t aux_count) {
  io::Table t(SurveySchema(aux_count));
  for (std::size_t c = 0; c < t.cols(); ++c) t.channel(c).values.resize(rows);
  const double n_e_d[3] = {18200.0, -2300.0, 47800.0};
  for (std::size_t r = 0; r < rows; ++r) {
    const double s = static_cast<double>(begin + r) / kRateHz;
    // Lines of 600 s flown alternately north and south, with 10 s turns.
    const double line = std::floor(s / 600.0);
    const double heading =
        std::fmod(line, 2.0) == 0.0 ? 2.0 + 3 * std::sin(0.05 * s)
                                    : 182.0 + 3 * std::sin(0.05 * s);
    const double roll = 4 * std::sin(0.31 * s) + 1.5 * std::sin(1.7 * s);
    const double pitch = 2 * std::sin(0.23 * s) + 0.7 * std::sin(1.1 * s);
    const double h = heading * kDeg, p = pitch * kDeg, q = roll * kDeg;
    const double ch = std::cos(h), sh = std::sin(h), cp = std::cos(p),
                 sp = std::sin(p), cr = std::cos(q), sr = std::sin(q);
    // Rows of the NED -> body direction cosine matrix (3-2-1).
    const double body[3] = {
        cp * ch * n_e_d[0] + cp * sh * n_e_d[1] - sp * n_e_d[2],
        (sr * sp * ch - cr * sh) * n_e_d[0] +
            (sr * sp * sh + cr * ch) * n_e_d[1] + sr * cp * n_e_d[2],
        (cr * sp * ch + sr * sh) * n_e_d[0] +
            (cr * sp * sh - sr * ch) * n_e_d[1] + cr * cp * n_e_d[2]};
    const double total =
        std::sqrt(body[0] * body[0] + body[1] * body[1] + body[2] * body[2]);
    const double values[11] = {
        Round(35012.3 + s, 0.1),
        Round(body[0] + 35.0, 0.01),  // platform's permanent field
        Round(body[1] - 12.0, 0.01),
        Round(body[2] + 20.0, 0.01),
        Round(total + 4.0 * std::sin(0.013 * s) + 0.8 * std::sin(0.21 * s),
              0.001),
        Round(roll, 0.01),
        Round(pitch, 0.01),
        Round(std::fmod(heading, 360.0), 0.01),
        Round(-31.2 - 1e-6 * s, 1e-7),
        Round(119.4 + 2e-5 * std::fmod(s, 600.0), 1e-7),
        Round(120.0 + 5 * std::sin(0.01 * s), 0.1)};
    for (std::size_t c = 0; c < 11; ++c) t.channel(c).values[r] = values[c];
    for (std::size_t a = 0; a < aux_count; ++a) {
      t.channel(11 + a).values[r] =
          Round(8.0 + 3.0 * std::sin(0.7 * s + static_cast<double>(a)), 0.001);
    }
  }
  return t;
}

// A 16-term model (plus 3 terms per aux channel) at 10 Hz, k = 2.
// Coefficient sizes as a compensation flight gives them (common practice,
// no single source): permanent tens of nT, induced 1e-4..1e-3 (x Bt ~ 50 000
// nT gives a few to tens of nT), eddy 1e-5..1e-4 s, aux ~0.5 nT/A.
inline proto::CompensationModel SurveyModel(std::size_t aux_count,
                                            double lag_s, bool sensor) {
  proto::CompensationModel m;
  m.set_schema_version(io::kModelSchemaVersion);
  m.mutable_terms()->set_set("default");
  models::TermOptions terms;
  for (std::size_t a = 0; a < aux_count; ++a) {
    terms.aux.push_back("aux_" + std::to_string(a));
    m.mutable_terms()->add_aux(terms.aux.back());
  }
  int i = 0;
  for (const std::string& name : models::TermNames(terms)) {
    m.mutable_terms()->add_names(name);
    proto::Coefficient* c = m.add_coefficients();
    c->set_name(name);
    const double sign = (i % 3 == 1) ? -1.0 : 1.0;
    if (name.rfind("perm", 0) == 0) {
      c->set_value(sign * (12.0 + 7.0 * i));
      c->set_unit("nT");
    } else if (name.rfind("ind", 0) == 0) {
      c->set_value(sign * 1e-4 * (1 + i % 5));
      c->set_unit("1");
    } else if (name.rfind("eddy", 0) == 0) {
      c->set_value(sign * 2e-5 * (1 + i % 4));
      c->set_unit("s");
    } else {
      c->set_value(sign * 0.5);
      c->set_unit("nT/A");
    }
    c->set_std_error(std::abs(c->value()) * 0.02);
    ++i;
  }
  m.mutable_filter()->set_order(4);
  m.mutable_filter()->set_low_hz(0.1);
  m.mutable_filter()->set_high_hz(0.9);
  m.mutable_filter()->set_kind("butterworth band-pass, zero-phase");
  m.set_derivative_half_width(2);
  m.set_sample_rate_hz(kRateHz);
  m.set_gap_factor(1.5);
  m.set_lag_s(lag_s);
  m.set_interference_mean_nt(-31.5);
  m.mutable_attitude()->set_present(true);
  m.mutable_attitude()->set_roll_min_deg(-25);
  m.mutable_attitude()->set_roll_max_deg(25);
  m.mutable_attitude()->set_pitch_min_deg(-12);
  m.mutable_attitude()->set_pitch_max_deg(12);
  m.mutable_inputs()->set_field_source("f");
  m.mutable_inputs()->set_file("generated survey (benchmark)");
  if (sensor) {
    proto::SensorCalibration* s = m.mutable_sensor();
    s->set_schema_version(1);
    auto set3 = [](proto::Vector3* v, double x, double y, double z) {
      v->set_x(x);
      v->set_y(y);
      v->set_z(z);
    };
    set3(s->mutable_gains(), 1.002, 0.998, 1.001);
    set3(s->mutable_offsets_nt(), 35.0, -12.0, 20.0);
    set3(s->mutable_nonorthogonality_deg(), 0.05, -0.03, 0.02);
    s->set_reference_temp_c(20.0);
    s->set_mode("scalar");
  }
  return m;
}

}  // namespace fluxtrim::perf
