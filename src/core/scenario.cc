#include "src/core/scenario.h"

#include <google/protobuf/io/tokenizer.h>
#include <google/protobuf/text_format.h>

#include <algorithm>
#include <cctype>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <fstream>
#include <limits>
#include <sstream>
#include <stdexcept>
#include <utility>

#include "io/error.h"
#include "io/text_proto_file.h"
#include "models/simulator.h"
#include "models/wmm.h"
#include "proto/scenario.pb.h"

namespace fluxtrim::core {
namespace {

using google::protobuf::Descriptor;
using google::protobuf::FieldDescriptor;
using google::protobuf::TextFormat;
using models::ManeuverKind;
using models::Vec3;

constexpr double kPi = 3.14159265358979323846;
constexpr double kDegToRad = kPi / 180.0;
constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
constexpr int kMaxDecimals = 12;

// Turns a field path ("sensors.fluxgate.gains.x", "platform.currents[1]")
// into the line and column where the parser saw it, for error messages.
class Locator {
 public:
  Locator(std::string source, const TextFormat::ParseInfoTree* tree)
      : source_(std::move(source)), tree_(tree) {}

  [[noreturn]] void Fail(const std::string& path,
                         const std::string& expected) const {
    int line = -1, column = -1;
    Find(path, &line, &column);
    const std::string message =
        path.empty() ? expected : "field " + path + ": expected " + expected;
    if (line < 0) throw io::InputError(source_, 0, 0, message);
    throw io::InputError(source_, static_cast<std::size_t>(line + 1),
                         static_cast<std::size_t>(column + 1), message);
  }

  const std::string& source() const { return source_; }

 private:
  // Location of the deepest component of path that the text contains.
  void Find(const std::string& path, int* line, int* column) const {
    const Descriptor* descriptor = proto::Scenario::descriptor();
    const TextFormat::ParseInfoTree* tree = tree_;
    std::stringstream parts(path);
    std::string part;
    while (tree && descriptor && std::getline(parts, part, '.')) {
      int index = -1;
      const auto bracket = part.find('[');
      if (bracket != std::string::npos) {
        index = std::atoi(part.c_str() + bracket + 1);
        part = part.substr(0, bracket);
      }
      const FieldDescriptor* field = descriptor->FindFieldByName(part);
      if (!field) return;
      if (field->is_repeated() && index < 0) index = 0;
      const auto location = tree->GetLocation(field, index);
      if (location.line >= 0) {
        *line = location.line;
        *column = location.column;
      }
      if (field->type() != FieldDescriptor::TYPE_MESSAGE) return;
      tree = tree->GetTreeForNested(field, index);
      descriptor = field->message_type();
    }
  }

  std::string source_;
  const TextFormat::ParseInfoTree* tree_;
};

std::string Number(double v) {
  char buffer[64];
  std::snprintf(buffer, sizeof buffer, "%.10g", v);
  return buffer;
}

// Checks lo <= v <= hi (NaN fails).
void Range(const Locator& at, const std::string& path, double v, double lo,
           double hi) {
  if (!(v >= lo && v <= hi)) {
    at.Fail(path, "a value within [" + Number(lo) + ", " + Number(hi) +
                      "], got " + Number(v));
  }
}
void Positive(const Locator& at, const std::string& path, double v,
              double hi) {
  if (!(v > 0 && v <= hi)) {
    at.Fail(path, "a value within (0, " + Number(hi) + "], got " + Number(v));
  }
}
void Finite(const Locator& at, const std::string& path, double v) {
  if (!std::isfinite(v)) at.Fail(path, "a finite number, got " + Number(v));
}
void Decimals(const Locator& at, const std::string& path, int d) {
  if (d < 0 || d > kMaxDecimals) {
    at.Fail(path, "a number of decimal places within [0, " +
                      std::to_string(kMaxDecimals) + "], got " +
                      std::to_string(d));
  }
}

Vec3 ToVec(const Locator& at, const std::string& path, const proto::Vec3& v) {
  Finite(at, path + ".x", v.x());
  Finite(at, path + ".y", v.y());
  Finite(at, path + ".z", v.z());
  return {v.x(), v.y(), v.z()};
}

models::Mat3 ToMat(const Locator& at, const std::string& path,
                   const proto::Matrix3& m) {
  const double v[9] = {m.xx(), m.xy(), m.xz(), m.yx(), m.yy(),
                       m.yz(), m.zx(), m.zy(), m.zz()};
  const char* names[9] = {"xx", "xy", "xz", "yx", "yy",
                          "yz", "zx", "zy", "zz"};
  models::Mat3 out;
  for (int k = 0; k < 9; ++k) {
    Range(at, path + "." + names[k], v[k], -1.0, 1.0);
    out.m[k / 3][k % 3] = v[k];
  }
  return out;
}

bool IsIdentifier(const std::string& s) {
  if (s.empty() || !(std::isalpha(static_cast<unsigned char>(s[0])) ||
                     s[0] == '_')) {
    return false;
  }
  for (char c : s) {
    if (!(std::isalnum(static_cast<unsigned char>(c)) || c == '_')) {
      return false;
    }
  }
  return true;
}

bool IsLeapYear(int year) {
  return (year % 4 == 0 && year % 100 != 0) || year % 400 == 0;
}

struct KindDefaults {
  const char* name;
  double speed_mps;
  double max_turn_rate_deg_s;
  double min_turn_s;
  bool bank;
};

KindDefaults DefaultsFor(proto::Platform::Kind kind) {
  switch (kind) {
    case proto::Platform::HELICOPTER:
      return {"helicopter", 40.0, 6.0, 5.0, true};
    case proto::Platform::DRONE:
      return {"drone", 5.0, 45.0, 2.0, false};
    case proto::Platform::GROUND_VEHICLE:
      return {"ground_vehicle", 3.0, 15.0, 2.0, false};
    case proto::Platform::AIRCRAFT:
    default:
      return {"aircraft", 70.0, 3.0, 5.0, true};
  }
}

// Everything the table builder needs besides the simulator config.
struct Plan {
  models::SimulatorConfig config;
  std::vector<std::string> current_names;
  std::vector<int> current_decimals;
  int fluxgate_decimals = 3;
  int scalar_decimals = 3;
  int attitude_decimals = 3;
  int temperature_decimals = 2;
  int time_decimals = 3;
  int latlon_decimals = 7;
  int alt_decimals = 2;
  int truth_decimals = 6;
  bool log_attitude = true;
};

std::vector<ManeuverKind> ParseSequence(const Locator& at,
                                        const std::string& text) {
  std::vector<ManeuverKind> kinds;
  std::string word;
  auto flush = [&] {
    if (word.empty()) return;
    std::string lower;
    for (char c : word) {
      lower += static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
    }
    if (lower == "pitch") {
      kinds.push_back(ManeuverKind::kPitch);
    } else if (lower == "roll") {
      kinds.push_back(ManeuverKind::kRoll);
    } else if (lower == "yaw") {
      kinds.push_back(ManeuverKind::kYaw);
    } else {
      at.Fail("compensation_box.sequence",
              "maneuver words pitch, roll or yaw, got '" + word + "'");
    }
    word.clear();
  };
  for (char c : text) {
    if (c == ' ' || c == ',' || c == '\t') {
      flush();
    } else {
      word += c;
    }
  }
  flush();
  if (kinds.empty()) {
    at.Fail("compensation_box.sequence", "at least one maneuver word");
  }
  return kinds;
}

Plan BuildPlan(const proto::Scenario& s, const Locator& at,
               const SimulateOptions& options) {
  Plan plan;
  models::SimulatorConfig& c = plan.config;

  // When and where.
  if (!s.has_date()) at.Fail("", "field date: required (\"YYYY-MM-DD\", UTC)");
  const std::string& date = s.date();
  const bool date_form =
      date.size() == 10 && date[4] == '-' && date[7] == '-' &&
      std::all_of(date.begin(), date.end(), [](char ch) {
        return ch == '-' || std::isdigit(static_cast<unsigned char>(ch));
      });
  if (!date_form) at.Fail("date", "a UTC date \"YYYY-MM-DD\", got '" + date + "'");
  try {
    c.decimal_year_at_midnight = models::ParseDecimalYear(date);
  } catch (const std::invalid_argument& e) {
    at.Fail("date", std::string("a valid calendar date (") + e.what() + ")");
  }
  c.year_length_days = IsLeapYear(std::atoi(date.substr(0, 4).c_str())) ? 366 : 365;
  Range(at, "start_time_s", s.start_time_s(), 0.0, 10.0 * 86400.0);
  c.start_time_s = s.start_time_s();
  if (!s.has_start_lat_deg()) at.Fail("", "field start_lat_deg: required");
  if (!s.has_start_lon_deg()) at.Fail("", "field start_lon_deg: required");
  Range(at, "start_lat_deg", s.start_lat_deg(), -89.0, 89.0);
  Range(at, "start_lon_deg", s.start_lon_deg(), -180.0, 360.0);
  Range(at, "start_alt_m", s.start_alt_m(), -1000.0, 100000.0);
  c.start_lat_deg = s.start_lat_deg();
  c.start_lon_deg = s.start_lon_deg();
  c.start_alt_m = s.start_alt_m();
  Positive(at, "sample_rate_hz", s.sample_rate_hz(), 10000.0);
  c.sample_rate_hz = s.sample_rate_hz();
  c.seed = options.override_seed ? options.seed : s.seed();

  // Platform.
  const proto::Platform& p = s.platform();
  const KindDefaults kind = DefaultsFor(p.kind());
  const bool rotations = s.plan_case() == proto::Scenario::kDroneRotations;
  double speed = rotations ? 0.5 : kind.speed_mps;
  if (s.has_speed_mps()) {
    if (rotations) {
      Range(at, "speed_mps", s.speed_mps(), 0.0, 50.0);
    } else {
      Positive(at, "speed_mps", s.speed_mps(), 400.0);
    }
    speed = s.speed_mps();
  }
  models::TurnOptions turn;
  turn.max_turn_rate = kind.max_turn_rate_deg_s * kDegToRad;
  turn.min_turn_s = kind.min_turn_s;
  turn.bank = kind.bank;
  if (p.has_max_turn_rate_deg_s()) {
    Positive(at, "platform.max_turn_rate_deg_s", p.max_turn_rate_deg_s(),
             360.0);
    turn.max_turn_rate = p.max_turn_rate_deg_s() * kDegToRad;
  }
  if (p.has_min_turn_s()) {
    Range(at, "platform.min_turn_s", p.min_turn_s(), 0.0, 3600.0);
    turn.min_turn_s = p.min_turn_s();
  }
  if (p.has_bank_in_turns()) turn.bank = p.bank_in_turns();
  turn.stop = p.kind() == proto::Platform::DRONE;
  if (p.has_stop_in_turns()) turn.stop = p.stop_in_turns();
  c.platform.permanent_nT =
      ToVec(at, "platform.permanent_nT", p.permanent_nt());
  c.platform.induced = ToMat(at, "platform.induced", p.induced());
  c.platform.eddy_s = ToMat(at, "platform.eddy_s", p.eddy_s());
  const char* reserved[] = {"time", "bx",  "by",  "bz",  "f",   "roll",
                            "pitch", "heading", "lat", "lon", "alt", "temp"};
  for (int k = 0; k < p.currents_size(); ++k) {
    const proto::CurrentChannel& q = p.currents(k);
    const std::string path = "platform.currents[" + std::to_string(k) + "]";
    if (!IsIdentifier(q.name())) {
      at.Fail(path + ".name",
              "a channel name of letters, digits and '_', got '" + q.name() +
                  "'");
    }
    for (const char* r : reserved) {
      if (io::EqualsIgnoreCase(q.name(), r)) {
        at.Fail(path + ".name", "a name other than the standard channel '" +
                                    std::string(r) + "'");
      }
    }
    for (const std::string& other : plan.current_names) {
      if (io::EqualsIgnoreCase(other, q.name())) {
        at.Fail(path + ".name", "a name not used by another current, got '" +
                                    q.name() + "' twice");
      }
    }
    models::CurrentSource src;
    src.name = q.name();
    src.coupling_nT_per_A =
        ToVec(at, path + ".coupling_nT_per_A", q.coupling_nt_per_a());
    Finite(at, path + ".base_A", q.base_a());
    Finite(at, path + ".tilt_gain_A", q.tilt_gain_a());
    Finite(at, path + ".rate_gain_A_per_deg_s", q.rate_gain_a_per_deg_s());
    Range(at, path + ".fluctuation_rms_A", q.fluctuation_rms_a(), 0.0, 1e6);
    Range(at, path + ".noise_rms_A", q.noise_rms_a(), 0.0, 1e6);
    Range(at, path + ".fluctuation_low_hz", q.fluctuation_low_hz(), 0.0, 1e4);
    if (!(q.fluctuation_high_hz() > q.fluctuation_low_hz()) ||
        !std::isfinite(q.fluctuation_high_hz())) {
      at.Fail(path + ".fluctuation_high_hz",
              "a frequency above fluctuation_low_hz");
    }
    Decimals(at, path + ".decimals", q.decimals());
    src.base_A = q.base_a();
    src.tilt_gain_A = q.tilt_gain_a();
    // Per deg/s in the file, per rad/s inside.
    src.rate_gain_A_s = q.rate_gain_a_per_deg_s() / kDegToRad;
    src.fluctuation_rms_A = q.fluctuation_rms_a();
    src.fluctuation_low_hz = q.fluctuation_low_hz();
    src.fluctuation_high_hz = q.fluctuation_high_hz();
    src.noise_rms_A = q.noise_rms_a();
    c.platform.currents.push_back(src);
    plan.current_names.push_back(q.name());
    plan.current_decimals.push_back(q.decimals());
  }

  // Sensors.
  const proto::Sensors& sn = s.sensors();
  const proto::Fluxgate& fg = sn.fluxgate();
  Range(at, "sensors.fluxgate.noise_rms_nT", fg.noise_rms_nt(), 0.0, 1e4);
  c.fluxgate.noise_rms_nT = fg.noise_rms_nt();
  const double gains[3] = {fg.gains().x(), fg.gains().y(), fg.gains().z()};
  const char* axis[3] = {"x", "y", "z"};
  const Vec3 offsets =
      ToVec(at, "sensors.fluxgate.offsets_nT", fg.offsets_nt());
  const Vec3 nonorth =
      ToVec(at, "sensors.fluxgate.nonorthogonality_deg",
            fg.nonorthogonality_deg());
  const Vec3 misalign =
      ToVec(at, "sensors.fluxgate.misalignment_deg", fg.misalignment_deg());
  const Vec3 gain_tc =
      ToVec(at, "sensors.fluxgate.gain_tc_per_K", fg.gain_tc_per_k());
  const Vec3 offset_tc = ToVec(at, "sensors.fluxgate.offset_tc_nT_per_K",
                               fg.offset_tc_nt_per_k());
  const double o3[3] = {offsets.x, offsets.y, offsets.z};
  const double n3[3] = {nonorth.x, nonorth.y, nonorth.z};
  const double m3[3] = {misalign.x, misalign.y, misalign.z};
  const double g3[3] = {gain_tc.x, gain_tc.y, gain_tc.z};
  const double t3[3] = {offset_tc.x, offset_tc.y, offset_tc.z};
  for (int i = 0; i < 3; ++i) {
    Range(at, std::string("sensors.fluxgate.gains.") + axis[i], gains[i], 0.8,
          1.2);
    Range(at, std::string("sensors.fluxgate.offsets_nT.") + axis[i], o3[i],
          -1e5, 1e5);
    Range(at, std::string("sensors.fluxgate.nonorthogonality_deg.") + axis[i],
          n3[i], -10.0, 10.0);
    Range(at, std::string("sensors.fluxgate.misalignment_deg.") + axis[i],
          m3[i], -10.0, 10.0);
    Range(at, std::string("sensors.fluxgate.gain_tc_per_K.") + axis[i], g3[i],
          -1e-2, 1e-2);
    Range(at, std::string("sensors.fluxgate.offset_tc_nT_per_K.") + axis[i],
          t3[i], -100.0, 100.0);
    c.fluxgate.errors.gains[i] = gains[i];
    c.fluxgate.errors.offsets_nT[i] = o3[i];
    c.fluxgate.errors.nonorthogonality_rad[i] = n3[i] * kDegToRad;
    c.fluxgate.errors.misalignment_rad[i] = m3[i] * kDegToRad;
    c.fluxgate.errors.gain_tc_per_K[i] = g3[i];
    c.fluxgate.errors.offset_tc_nT_per_K[i] = t3[i];
  }
  Range(at, "sensors.fluxgate.reference_temp_c", fg.reference_temp_c(),
        -100.0, 200.0);
  c.fluxgate.errors.reference_temp_c = fg.reference_temp_c();
  Decimals(at, "sensors.fluxgate.decimals", fg.decimals());
  plan.fluxgate_decimals = fg.decimals();
  c.scalar.present = sn.has_scalar();
  if (sn.has_scalar()) {
    Range(at, "sensors.scalar.noise_rms_nT", sn.scalar().noise_rms_nt(), 0.0,
          1e4);
    Range(at, "sensors.scalar.lag_s", sn.scalar().lag_s(), -10.0, 10.0);
    Decimals(at, "sensors.scalar.decimals", sn.scalar().decimals());
    c.scalar.noise_rms_nT = sn.scalar().noise_rms_nt();
    c.scalar.lag_s = sn.scalar().lag_s();
    plan.scalar_decimals = sn.scalar().decimals();
  }
  plan.log_attitude = sn.log_attitude();
  Range(at, "sensors.attitude_noise_deg", sn.attitude_noise_deg(), 0.0, 10.0);
  c.attitude_noise_rad = sn.attitude_noise_deg() * kDegToRad;
  Decimals(at, "sensors.attitude_decimals", sn.attitude_decimals());
  plan.attitude_decimals = sn.attitude_decimals();
  if (sn.has_temperature()) {
    const proto::Temperature& t = sn.temperature();
    Range(at, "sensors.temperature.start_c", t.start_c(), -100.0, 200.0);
    Range(at, "sensors.temperature.drift_c_per_h", t.drift_c_per_h(), -100.0,
          100.0);
    Range(at, "sensors.temperature.noise_rms_c", t.noise_rms_c(), 0.0, 100.0);
    Decimals(at, "sensors.temperature.decimals", t.decimals());
    c.temperature.logged = true;
    c.temperature.start_c = t.start_c();
    c.temperature.drift_c_per_h = t.drift_c_per_h();
    c.temperature.noise_rms_c = t.noise_rms_c();
    plan.temperature_decimals = t.decimals();
  } else {
    c.temperature.start_c = c.fluxgate.errors.reference_temp_c;
  }

  // Environment.
  const proto::Environment& env = s.environment();
  c.environment.main_field = env.main_field();
  if (!env.main_field()) {
    c.environment.fixed_field_ned_nT =
        ToVec(at, "environment.fixed_field_nT", env.fixed_field_nt());
    if (!(models::Norm(c.environment.fixed_field_ned_nT) > 0)) {
      at.Fail("environment.fixed_field_nT",
              "a non-zero field when main_field is false");
    }
  }
  if (env.has_map_origin_lat_deg()) {
    Range(at, "environment.map_origin_lat_deg", env.map_origin_lat_deg(),
          -89.0, 89.0);
    c.environment.map_origin_lat_deg = env.map_origin_lat_deg();
  }
  if (env.has_map_origin_lon_deg()) {
    Range(at, "environment.map_origin_lon_deg", env.map_origin_lon_deg(),
          -180.0, 360.0);
    c.environment.map_origin_lon_deg = env.map_origin_lon_deg();
  }
  if (env.has_map_origin_lat_deg() != env.has_map_origin_lon_deg()) {
    at.Fail(env.has_map_origin_lat_deg() ? "environment.map_origin_lat_deg"
                                         : "environment.map_origin_lon_deg",
            "both map_origin_lat_deg and map_origin_lon_deg, or neither");
  }
  Range(at, "environment.ground_alt_m", env.ground_alt_m(), -1000.0, 10000.0);
  const proto::Geology& geo = env.geology();
  Range(at, "environment.geology.rms_nT", geo.rms_nt(), 0.0, 1e5);
  Positive(at, "environment.geology.min_wavelength_m", geo.min_wavelength_m(),
           1e7);
  if (!(geo.max_wavelength_m() >= geo.min_wavelength_m()) ||
      !(geo.max_wavelength_m() <= 1e7)) {
    at.Fail("environment.geology.max_wavelength_m",
            "a wavelength within [min_wavelength_m, 1e7] m");
  }
  Range(at, "environment.geology.components", geo.components(), 1, 10000);
  c.environment.geology.rms_nT = geo.rms_nt();
  c.environment.geology.min_wavelength_m = geo.min_wavelength_m();
  c.environment.geology.max_wavelength_m = geo.max_wavelength_m();
  c.environment.geology.components = geo.components();
  c.environment.geology.reference_alt_m =
      geo.has_reference_alt_m() ? geo.reference_alt_m() : env.ground_alt_m();
  Finite(at, "environment.geology.reference_alt_m",
         c.environment.geology.reference_alt_m);
  if (geo.has_map_seed()) {
    c.environment.has_geology_seed = true;
    c.environment.geology_seed = geo.map_seed();
  }
  const proto::Diurnal& di = env.diurnal();
  Range(at, "environment.diurnal.amplitude_nT", di.amplitude_nt(), -1e4, 1e4);
  Positive(at, "environment.diurnal.period_s", di.period_s(), 1e8);
  Finite(at, "environment.diurnal.phase_deg", di.phase_deg());
  Range(at, "environment.diurnal.micropulsation_rms_nT",
        di.micropulsation_rms_nt(), 0.0, 1e4);
  Range(at, "environment.diurnal.micropulsation_low_hz",
        di.micropulsation_low_hz(), 0.0, 1e3);
  if (!(di.micropulsation_high_hz() > di.micropulsation_low_hz()) ||
      !std::isfinite(di.micropulsation_high_hz())) {
    at.Fail("environment.diurnal.micropulsation_high_hz",
            "a frequency above micropulsation_low_hz");
  }
  c.environment.diurnal.amplitude_nT = di.amplitude_nt();
  c.environment.diurnal.period_s = di.period_s();
  c.environment.diurnal.phase_deg = di.phase_deg();
  c.environment.diurnal.micropulsation_rms_nT = di.micropulsation_rms_nt();
  c.environment.diurnal.micropulsation_low_hz = di.micropulsation_low_hz();
  c.environment.diurnal.micropulsation_high_hz = di.micropulsation_high_hz();
  if (di.has_map_seed()) {
    c.environment.has_diurnal_seed = true;
    c.environment.diurnal_seed = di.map_seed();
  }
  for (int k = 0; k < env.dipoles_size(); ++k) {
    const proto::Dipole& d = env.dipoles(k);
    const std::string path = "environment.dipoles[" + std::to_string(k) + "]";
    Range(at, path + ".north_m", d.north_m(), -1e6, 1e6);
    Range(at, path + ".east_m", d.east_m(), -1e6, 1e6);
    Range(at, path + ".depth_m", d.depth_m(), -1e4, 1e4);
    Range(at, path + ".moment_Am2", d.moment_am2(), 0.0, 1e9);
    models::DipoleSource src;
    src.north_m = d.north_m();
    src.east_m = d.east_m();
    src.alt_m = env.ground_alt_m() - d.depth_m();
    Vec3 direction;
    if (d.has_inclination_deg() || d.has_declination_deg()) {
      Range(at, path + ".inclination_deg", d.inclination_deg(), -90.0, 90.0);
      Range(at, path + ".declination_deg", d.declination_deg(), -360.0,
            360.0);
      const double inc = d.inclination_deg() * kDegToRad;
      const double dec = d.declination_deg() * kDegToRad;
      direction = {std::cos(inc) * std::cos(dec),
                   std::cos(inc) * std::sin(dec), std::sin(inc)};
    } else if (env.main_field()) {
      const double lat = env.has_map_origin_lat_deg() ? env.map_origin_lat_deg()
                                                      : s.start_lat_deg();
      const double lon = env.has_map_origin_lon_deg() ? env.map_origin_lon_deg()
                                                      : s.start_lon_deg();
      const models::GeomagneticField g = models::MagneticModel::Wmm2025().Field(
          lat, lon, env.ground_alt_m(), c.decimal_year_at_midnight);
      direction = (1.0 / g.f_nT) * Vec3{g.x_nT, g.y_nT, g.z_nT};
    } else {
      const Vec3& f = c.environment.fixed_field_ned_nT;
      direction = (1.0 / models::Norm(f)) * f;
    }
    src.moment_Am2 = d.moment_am2() * direction;
    c.environment.dipoles.push_back(src);
  }

  // Turbulence.
  const proto::Turbulence& tu = s.turbulence();
  Range(at, "turbulence.roll_rms_deg", tu.roll_rms_deg(), 0.0, 30.0);
  Range(at, "turbulence.pitch_rms_deg", tu.pitch_rms_deg(), 0.0, 30.0);
  Range(at, "turbulence.heading_rms_deg", tu.heading_rms_deg(), 0.0, 30.0);
  Range(at, "turbulence.low_hz", tu.low_hz(), 0.0, 1e3);
  if (!(tu.high_hz() > tu.low_hz()) || !std::isfinite(tu.high_hz())) {
    at.Fail("turbulence.high_hz", "a frequency above low_hz");
  }
  c.turbulence.roll_rms = tu.roll_rms_deg() * kDegToRad;
  c.turbulence.pitch_rms = tu.pitch_rms_deg() * kDegToRad;
  c.turbulence.heading_rms = tu.heading_rms_deg() * kDegToRad;
  c.turbulence.low_hz = tu.low_hz();
  c.turbulence.high_hz = tu.high_hz();

  // Faults.
  const proto::Faults& fa = s.faults();
  Range(at, "faults.spikes.fraction", fa.spikes().fraction(), 0.0, 1.0);
  Range(at, "faults.spikes.amplitude_nT", fa.spikes().amplitude_nt(), -1e6,
        1e6);
  c.faults.spike_fraction = fa.spikes().fraction();
  c.faults.spike_amplitude_nT = fa.spikes().amplitude_nt();
  c.faults.spikes_on_fluxgate =
      fa.spikes().on_fluxgate() || !sn.has_scalar();
  for (int k = 0; k < fa.dropouts_size(); ++k) {
    const proto::Dropout& d = fa.dropouts(k);
    const std::string path = "faults.dropouts[" + std::to_string(k) + "]";
    Positive(at, path + ".duration_s", d.duration_s(), 1e6);
    Range(at, path + ".count", d.count(), 0, 100000);
    models::Dropout out;
    out.kind = d.kind() == proto::Dropout::TIME_GAP
                   ? models::Dropout::Kind::kTimeGap
                   : models::Dropout::Kind::kNanRun;
    out.channels = d.channels() == proto::Dropout::SCALAR
                       ? models::Dropout::Channels::kScalar
                   : d.channels() == proto::Dropout::FLUXGATE
                       ? models::Dropout::Channels::kFluxgate
                       : models::Dropout::Channels::kAll;
    out.count = d.count();
    out.duration_s = d.duration_s();
    for (int j = 0; j < d.at_s_size(); ++j) {
      Range(at, path + ".at_s[" + std::to_string(j) + "]", d.at_s(j), 0.0,
            1e8);
      out.at_s.push_back(d.at_s(j));
    }
    c.faults.dropouts.push_back(out);
  }

  // Output resolution.
  const proto::Output& out = s.output();
  Decimals(at, "output.time_decimals", out.time_decimals());
  Decimals(at, "output.latlon_decimals", out.latlon_decimals());
  Decimals(at, "output.alt_decimals", out.alt_decimals());
  Decimals(at, "output.truth_decimals", out.truth_decimals());
  plan.time_decimals = out.time_decimals();
  plan.latlon_decimals = out.latlon_decimals();
  plan.alt_decimals = out.alt_decimals();
  plan.truth_decimals = out.truth_decimals();

  // Maneuver plan.
  switch (s.plan_case()) {
    case proto::Scenario::kCompensationBox: {
      const proto::CompensationBox& b = s.compensation_box();
      models::CompensationBoxOptions o;
      if (b.headings_deg_size() > 0) {
        o.headings.clear();
        for (int k = 0; k < b.headings_deg_size(); ++k) {
          Range(at, "compensation_box.headings_deg[" + std::to_string(k) + "]",
                b.headings_deg(k), -360.0, 720.0);
          o.headings.push_back(b.headings_deg(k) * kDegToRad);
        }
      }
      o.sequence = ParseSequence(at, b.sequence());
      Range(at, "compensation_box.pitch_amplitude_deg",
            b.pitch_amplitude_deg(), -30.0, 30.0);
      Range(at, "compensation_box.roll_amplitude_deg", b.roll_amplitude_deg(),
            -45.0, 45.0);
      Range(at, "compensation_box.yaw_amplitude_deg", b.yaw_amplitude_deg(),
            -30.0, 30.0);
      Positive(at, "compensation_box.pitch_period_s", b.pitch_period_s(),
               600.0);
      Positive(at, "compensation_box.roll_period_s", b.roll_period_s(), 600.0);
      Positive(at, "compensation_box.yaw_period_s", b.yaw_period_s(), 600.0);
      Range(at, "compensation_box.cycles", b.cycles(), 1, 1000);
      Range(at, "compensation_box.settle_s", b.settle_s(), 0.0, 36000.0);
      Range(at, "compensation_box.lead_in_s", b.lead_in_s(), 0.0, 36000.0);
      o.pitch_amplitude = b.pitch_amplitude_deg() * kDegToRad;
      o.roll_amplitude = b.roll_amplitude_deg() * kDegToRad;
      o.yaw_amplitude = b.yaw_amplitude_deg() * kDegToRad;
      o.pitch_period_s = b.pitch_period_s();
      o.roll_period_s = b.roll_period_s();
      o.yaw_period_s = b.yaw_period_s();
      o.cycles = b.cycles();
      o.settle_s = b.settle_s();
      o.lead_in_s = b.lead_in_s();
      o.speed_mps = speed;
      o.turn = turn;
      c.plan = models::BuildCompensationBox(o);
      break;
    }
    case proto::Scenario::kSurveyLines: {
      const proto::SurveyLines& l = s.survey_lines();
      models::SurveyLinesOptions o;
      Range(at, "survey_lines.heading_deg", l.heading_deg(), -360.0, 720.0);
      Range(at, "survey_lines.line_count", l.line_count(), 1, 10000);
      Positive(at, "survey_lines.line_length_m", l.line_length_m(), 1e7);
      Range(at, "survey_lines.line_spacing_m", l.line_spacing_m(), 0.0, 1e6);
      Range(at, "survey_lines.lead_in_s", l.lead_in_s(), 0.0, 36000.0);
      o.heading = l.heading_deg() * kDegToRad;
      o.line_count = l.line_count();
      o.line_length_m = l.line_length_m();
      o.line_spacing_m = l.line_spacing_m();
      o.lead_in_s = l.lead_in_s();
      o.first_turn_right = l.first_turn_right();
      o.speed_mps = speed;
      o.turn = turn;
      c.plan = models::BuildSurveyLines(o);
      break;
    }
    case proto::Scenario::kDroneRotations: {
      const proto::DroneRotations& d = s.drone_rotations();
      models::DroneRotationOptions o;
      if (d.tilts_deg_size() > 0) {
        o.tilts.clear();
        for (int k = 0; k < d.tilts_deg_size(); ++k) {
          Range(at, "drone_rotations.tilts_deg[" + std::to_string(k) + "]",
                d.tilts_deg(k), -60.0, 60.0);
          o.tilts.push_back(d.tilts_deg(k) * kDegToRad);
        }
      }
      Positive(at, "drone_rotations.mean_yaw_rate_deg_s",
               d.mean_yaw_rate_deg_s(), 360.0);
      Positive(at, "drone_rotations.turns_per_tilt", d.turns_per_tilt(),
               100.0);
      Positive(at, "drone_rotations.transition_s", d.transition_s(), 3600.0);
      Range(at, "drone_rotations.hover_s", d.hover_s(), 0.0, 36000.0);
      Range(at, "drone_rotations.drift_heading_deg", d.drift_heading_deg(),
            -360.0, 720.0);
      o.mean_yaw_rate = d.mean_yaw_rate_deg_s() * kDegToRad;
      o.turns_per_tilt = d.turns_per_tilt();
      o.transition_s = d.transition_s();
      o.hover_s = d.hover_s();
      o.drift_course = d.drift_heading_deg() * kDegToRad;
      o.alternate_direction = d.alternate_direction();
      o.speed_mps = speed;
      c.plan = models::BuildDroneRotations(o);
      break;
    }
    case proto::Scenario::kVehicleLoop: {
      const proto::VehicleLoop& v = s.vehicle_loop();
      models::VehicleLoopOptions o;
      if (v.legs_size() > 0) {
        o.legs.clear();
        for (int k = 0; k < v.legs_size(); ++k) {
          const std::string path = "vehicle_loop.legs[" + std::to_string(k) + "]";
          Range(at, path + ".heading_deg", v.legs(k).heading_deg(), -360.0,
                720.0);
          Positive(at, path + ".length_m", v.legs(k).length_m(), 1e7);
          o.legs.push_back(
              {v.legs(k).heading_deg() * kDegToRad, v.legs(k).length_m()});
        }
      }
      Range(at, "vehicle_loop.laps", v.laps(), 1, 10000);
      Range(at, "vehicle_loop.lead_in_s", v.lead_in_s(), 0.0, 36000.0);
      o.laps = v.laps();
      o.lead_in_s = v.lead_in_s();
      o.speed_mps = speed;
      o.turn = turn;
      c.plan = models::BuildVehicleLoop(o);
      break;
    }
    case proto::Scenario::PLAN_NOT_SET:
      at.Fail("", "a maneuver plan: one of compensation_box, survey_lines, "
                  "drone_rotations, vehicle_loop");
  }

  std::string error;
  if (!c.IsValid(&error)) throw io::InputError(at.source(), "scenario", error);
  return plan;
}

// Rounds to the logging resolution: round(x 10^d) / 10^d. Dividing by an
// exact power of ten gives the double nearest to the decimal value, so the
// file's shortest representation is that decimal.
double Round(double x, int decimals) {
  static const double kPow10[kMaxDecimals + 1] = {
      1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12};
  if (!std::isfinite(x)) return x;
  const double p = kPow10[decimals];
  const double r = std::round(x * p) / p;
  return r == 0.0 ? 0.0 : r;  // no "-0"
}

io::Channel& Add(io::Table* table, const std::string& name,
                 const std::string& unit, const std::string& long_name) {
  return table->AddChannel({name, unit, long_name});
}

void Fill(io::Channel& channel, const std::vector<double>& values,
          int decimals) {
  channel.values.resize(values.size());
  for (std::size_t i = 0; i < values.size(); ++i) {
    channel.values[i] = Round(values[i], decimals);
  }
}

SimulatedFlight BuildTables(const proto::Scenario& s, const Plan& plan,
                            const models::SimulationResult& r) {
  SimulatedFlight flight;
  const std::size_t n = r.time_s.size();
  io::Table& rec = flight.recording;
  Fill(Add(&rec, "time", "s", "seconds after midnight UTC"), r.time_s,
       plan.time_decimals);
  std::vector<double> bx(n), by(n), bz(n);
  for (std::size_t i = 0; i < n; ++i) {
    bx[i] = r.fluxgate_nT[i].x;
    by[i] = r.fluxgate_nT[i].y;
    bz[i] = r.fluxgate_nT[i].z;
  }
  Fill(Add(&rec, "bx", "nT", "fluxgate x (forward) raw"), bx,
       plan.fluxgate_decimals);
  Fill(Add(&rec, "by", "nT", "fluxgate y (starboard) raw"), by,
       plan.fluxgate_decimals);
  Fill(Add(&rec, "bz", "nT", "fluxgate z (down) raw"), bz,
       plan.fluxgate_decimals);
  if (plan.config.scalar.present) {
    Fill(Add(&rec, "f", "nT", "scalar magnetometer"), r.scalar_nT,
         plan.scalar_decimals);
  }
  if (plan.log_attitude) {
    Fill(Add(&rec, "roll", "deg", "roll (starboard down positive)"),
         r.roll_deg, plan.attitude_decimals);
    Fill(Add(&rec, "pitch", "deg", "pitch (nose up positive)"), r.pitch_deg,
         plan.attitude_decimals);
    // Rounding may carry 359.9996 up to 360: wrap it back to 0.
    io::Channel& heading = Add(&rec, "heading", "deg", "true heading");
    Fill(heading, r.heading_deg, plan.attitude_decimals);
    for (double& h : heading.values) {
      if (h >= 360.0) h -= 360.0;
    }
  }
  Fill(Add(&rec, "lat", "deg", "WGS84 latitude"), r.lat_deg,
       plan.latlon_decimals);
  Fill(Add(&rec, "lon", "deg", "WGS84 longitude"), r.lon_deg,
       plan.latlon_decimals);
  Fill(Add(&rec, "alt", "m", "height above the WGS84 ellipsoid"), r.alt_m,
       plan.alt_decimals);
  for (std::size_t k = 0; k < plan.current_names.size(); ++k) {
    Fill(Add(&rec, plan.current_names[k], "A", "current"), r.currents_A[k],
         plan.current_decimals[k]);
  }
  if (plan.config.temperature.logged) {
    Fill(Add(&rec, "temp", "degC", "sensor temperature"), r.temperature_c,
         plan.temperature_decimals);
  }

  io::Table& truth = flight.truth;
  const int d = plan.truth_decimals;
  Fill(Add(&truth, "time", "s", "seconds after midnight UTC"), r.time_s,
       plan.time_decimals);
  Fill(Add(&truth, "f_interference_true", "nT",
           "platform interference on the total field"),
       r.f_interference_true, d);
  Fill(Add(&truth, "f_ambient", "nT", "|Earth + geology + diurnal|"),
       r.f_ambient, d);
  Fill(Add(&truth, "f_earth", "nT", "|main field| (WMM2025)"), r.f_earth, d);
  Fill(Add(&truth, "f_geology", "nT", "geology and dipoles"), r.f_geology, d);
  Fill(Add(&truth, "f_diurnal", "nT", "diurnal variation"), r.f_diurnal, d);
  Fill(Add(&truth, "noise_f", "nT", "injected scalar noise"), r.noise_f, d);
  Fill(Add(&truth, "spike_f", "nT", "injected spike"), r.spike_f, d);
  std::vector<double> ex(n), ey(n), ez(n), kind(n);
  for (std::size_t i = 0; i < n; ++i) {
    ex[i] = r.earth_body_nT[i].x;
    ey[i] = r.earth_body_nT[i].y;
    ez[i] = r.earth_body_nT[i].z;
    kind[i] = r.maneuver_kind[i];
  }
  Fill(Add(&truth, "earth_bx", "nT", "main field in body x"), ex, d);
  Fill(Add(&truth, "earth_by", "nT", "main field in body y"), ey, d);
  Fill(Add(&truth, "earth_bz", "nT", "main field in body z"), ez, d);
  Fill(Add(&truth, "maneuver_kind", "",
           "0 none 1 pitch 2 roll 3 yaw 4 rotation"),
       kind, 0);
  Fill(Add(&truth, "maneuver_heading_deg", "deg",
           "reference heading of the maneuver"),
       r.maneuver_heading_deg, d);

  for (const models::ManeuverTruth& m : r.maneuvers) {
    SegmentTruth t;
    t.start_s = plan.config.start_time_s + m.start_s;
    t.end_s = plan.config.start_time_s + m.end_s;
    t.heading_deg = m.heading / kDegToRad;
    t.kind = static_cast<int>(m.kind);
    flight.segments.push_back(t);
  }
  flight.name = s.name();
  flight.description = s.description();
  flight.platform_kind = DefaultsFor(s.platform().kind()).name;
  flight.has_scalar_sensor = plan.config.scalar.present;
  flight.sample_rate_hz = plan.config.sample_rate_hz;
  flight.seed = plan.config.seed;
  return flight;
}

double ShortestManeuverPeriod(const models::ManeuverPlan& plan) {
  double shortest = std::numeric_limits<double>::infinity();
  for (const models::PlanSegment& g : plan.segments()) {
    if (g.period_s > 0) shortest = std::min(shortest, g.period_s);
  }
  return shortest;
}

}  // namespace

SimulatedFlight SimulateScenarioText(const std::string& text,
                                     const std::string& source_name) {
  return SimulateScenarioText(text, source_name, SimulateOptions());
}

SimulatedFlight SimulateScenarioText(const std::string& text,
                                     const std::string& source_name,
                                     const SimulateOptions& options) {
  proto::Scenario scenario;
  io::FirstTextError errors;
  TextFormat::ParseInfoTree tree;
  TextFormat::Parser parser;
  parser.RecordErrorsTo(&errors);
  parser.WriteLocationsTo(&tree);
  if (!parser.ParseFromString(text, &scenario)) {
    if (errors.found()) {
      throw io::InputError(source_name,
                           errors.line(), errors.column(),
                           "scenario: " + errors.message());
    }
    throw io::InputError(source_name, 0, 0,
                         "scenario: not a valid protobuf text-format "
                         "fluxtrim.proto.Scenario");
  }
  const Locator at(source_name, &tree);
  const Plan plan = BuildPlan(scenario, at, options);
  models::SimulationResult result;
  try {
    result = models::Simulate(plan.config);
  } catch (const std::invalid_argument& e) {
    throw io::InputError(source_name, "scenario", e.what());
  }
  SimulatedFlight flight = BuildTables(scenario, plan, result);
  if (flight.name.empty()) flight.name = source_name;
  const models::MagneticModel& wmm = models::MagneticModel::Wmm2025();
  if (plan.config.environment.main_field &&
      !wmm.IsValidDate(plan.config.decimal_year_at_midnight)) {
    flight.warnings.push_back(
        "date " + scenario.date() + " is outside the validity of " +
        wmm.name() + " (" + Number(wmm.epoch()) + " to " +
        Number(wmm.epoch() + 5.0) + "): the main field is extrapolated");
  }
  const double shortest_period_s = ShortestManeuverPeriod(plan.config.plan);
  if (shortest_period_s * plan.config.sample_rate_hz < 10.0) {
    flight.warnings.push_back(
        "fewer than 10 samples per maneuver period (" +
        Number(shortest_period_s) + " s at " +
        Number(plan.config.sample_rate_hz) +
        " Hz): the eddy terms will be poorly sampled");
  }
  return flight;
}

SimulatedFlight SimulateScenarioFile(const std::string& path) {
  return SimulateScenarioFile(path, SimulateOptions());
}

SimulatedFlight SimulateScenarioFile(const std::string& path,
                                     const SimulateOptions& options) {
  std::ifstream in(path, std::ios::binary);
  if (!in) throw io::InputError(path, 0, 0, "cannot open the scenario file");
  std::stringstream buffer;
  buffer << in.rdbuf();
  if (in.bad()) throw io::InputError(path, 0, 0, "cannot read the scenario file");
  return SimulateScenarioText(buffer.str(), path, options);
}

std::string FormatSegmentsCsv(const SimulatedFlight& flight) {
  auto number = [](double v) {
    char buffer[32];
    const auto r = std::to_chars(buffer, buffer + sizeof buffer, v);
    return std::string(buffer, r.ptr);
  };
  std::string out = "start_s,end_s,heading_deg,kind\n";
  for (const SegmentTruth& s : flight.segments) {
    const char* kind = s.kind == 1   ? "pitch"
                       : s.kind == 2 ? "roll"
                       : s.kind == 3 ? "yaw"
                                     : nullptr;
    if (!kind) continue;
    out += number(s.start_s) + "," + number(s.end_s) + "," +
           number(s.heading_deg) + "," + kind + "\n";
  }
  return out;
}

FlightSummary SummarizeFlight(const SimulatedFlight& flight) {
  FlightSummary s;
  const io::Table& truth = flight.truth;
  s.samples = truth.rows();
  if (s.samples == 0) return s;
  const std::vector<double>& time = truth.Column("time");
  const std::vector<double>& h = truth.Column("f_interference_true");
  s.duration_s = time.back() - time.front();
  s.sample_rate_hz = flight.sample_rate_hz;
  double lo = std::numeric_limits<double>::infinity();
  double hi = -lo;
  for (double v : h) {
    if (!std::isfinite(v)) continue;
    lo = std::min(lo, v);
    hi = std::max(hi, v);
  }
  s.interference_min_nT = std::isfinite(lo) ? lo : kNaN;
  s.interference_max_nT = std::isfinite(hi) ? hi : kNaN;
  for (const SegmentTruth& g : flight.segments) {
    double a = std::numeric_limits<double>::infinity(), b = -a;
    for (std::size_t i = 0; i < time.size(); ++i) {
      if (time[i] < g.start_s || time[i] > g.end_s || !std::isfinite(h[i])) {
        continue;
      }
      a = std::min(a, h[i]);
      b = std::max(b, h[i]);
    }
    if (b >= a) s.maneuver_peak_to_peak_sum_nT += b - a;
    ++s.maneuvers;
  }
  return s;
}

std::string FormatFlightSummary(const SimulatedFlight& flight,
                                const FlightSummary& s) {
  char line[256];
  std::string out;
  out += "scenario: " + flight.name + " (" + flight.platform_kind + ", " +
         (flight.has_scalar_sensor ? "scalar sensor and fluxgate"
                                   : "fluxgate only") +
         ", seed " + std::to_string(flight.seed) + ")\n";
  std::snprintf(line, sizeof line, "samples: %zu at %.6g Hz, duration %.1f s\n",
                s.samples, s.sample_rate_hz, s.duration_s);
  out += line;
  std::snprintf(line, sizeof line,
                "platform interference on the total field: %.3f to %.3f nT "
                "(peak-to-peak %.3f nT)\n",
                s.interference_min_nT, s.interference_max_nT,
                s.interference_max_nT - s.interference_min_nT);
  out += line;
  if (s.maneuvers > 0) {
    std::snprintf(line, sizeof line,
                  "maneuvers: %zu; sum of their peak-to-peak interference "
                  "(unfiltered, FOM-like): %.3f nT\n",
                  s.maneuvers, s.maneuver_peak_to_peak_sum_nT);
    out += line;
  } else {
    out += "maneuvers: none\n";
  }
  return out;
}

}  // namespace fluxtrim::core
