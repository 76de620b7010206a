#include "io/sensor_file.h"

#include <cmath>
#include <limits>
#include <sstream>
#include <stdexcept>

#include <google/protobuf/text_format.h>

#include "io/error.h"
#include "io/text_proto_file.h"

namespace fluxtrim::io {
namespace {

constexpr char kHeader[] =
    "# fluxtrim fluxgate sensor calibration (protobuf text format, schema\n"
    "# fluxtrim.proto.SensorCalibration).\n"
    "# Forward model E = S P R B + o: B true field in body axes (x forward,\n"
    "# y starboard, z down), R = Rx(a_x) Ry(a_y) Rz(a_z) misalignment, P\n"
    "# non-orthogonality with rows [1,0,0], [sin u1, cos u1, 0],\n"
    "# [sin u2, sin u3 cos u2, cos u2 cos u3], S = diag(gains), o offsets.\n"
    "# Calibrated field B = R^T P^-1 S^-1 (E - o) - sum_k a_k g_k.\n"
    "# Units: gains 1, offsets nT, angles deg, gain_tc 1/K, offset_tc nT/K,\n"
    "# aux couplings nT per unit of the channel. has_misalignment: false\n"
    "# means the rotation was not determined (magnitude-only calibration).\n";

constexpr double kMaxAngleDeg = 45.0;

void CheckVector(const proto::Vector3& v, const std::string& source,
                 const std::string& field, double max_abs) {
  const double c[3] = {v.x(), v.y(), v.z()};
  const char* axis[3] = {"x", "y", "z"};
  for (int k = 0; k < 3; ++k) {
    if (!std::isfinite(c[k]) || !(std::abs(c[k]) < max_abs)) {
      std::ostringstream m;
      m << "value " << c[k] << " is not "
        << (std::isfinite(max_abs) ? "a finite number of magnitude below " +
                                         std::to_string(max_abs)
                                   : std::string("a finite number"));
      throw InputError(source, "field " + field + "." + axis[k], m.str());
    }
  }
}

}  // namespace

void CheckSensorCalibration(const proto::SensorCalibration& cal,
                            const std::string& source_name,
                            const std::string& place) {
  const double inf = std::numeric_limits<double>::infinity();
  const proto::Vector3& g = cal.gains();
  const double gains[3] = {g.x(), g.y(), g.z()};
  const char* axis[3] = {"x", "y", "z"};
  for (int k = 0; k < 3; ++k) {
    if (!(gains[k] > 0) || !std::isfinite(gains[k])) {
      std::ostringstream m;
      m << "gain " << gains[k]
        << " is not a finite positive number (1 = perfect)";
      throw InputError(source_name, "field " + place + "gains." + axis[k],
                       m.str());
    }
  }
  CheckVector(cal.offsets_nt(), source_name, place + "offsets_nT", inf);
  CheckVector(cal.nonorthogonality_deg(), source_name,
              place + "nonorthogonality_deg", kMaxAngleDeg);
  CheckVector(cal.misalignment_deg(), source_name, place + "misalignment_deg",
              kMaxAngleDeg);
  CheckVector(cal.gain_tc_per_k(), source_name, place + "gain_tc_per_K", 0.1);
  CheckVector(cal.offset_tc_nt_per_k(), source_name,
              place + "offset_tc_nT_per_K", inf);
  if (!std::isfinite(cal.reference_temp_c())) {
    throw InputError(source_name, "field " + place + "reference_temp_c",
                     "expected a finite temperature (deg C)");
  }
  const bool has_tc =
      cal.gain_tc_per_k().x() != 0 || cal.gain_tc_per_k().y() != 0 ||
      cal.gain_tc_per_k().z() != 0 || cal.offset_tc_nt_per_k().x() != 0 ||
      cal.offset_tc_nt_per_k().y() != 0 || cal.offset_tc_nt_per_k().z() != 0;
  if (has_tc && cal.temperature_channel().empty()) {
    throw InputError(source_name, "field " + place + "temperature_channel",
                     "temperature coefficients are set but no channel is "
                     "named");
  }
  for (int i = 0; i < cal.aux_size(); ++i) {
    const std::string f = place + "aux[" + std::to_string(i) + "]";
    if (cal.aux(i).channel().empty()) {
      throw InputError(source_name, "field " + f + ".channel",
                       "expected the name of the aux channel");
    }
    CheckVector(cal.aux(i).coupling_nt_per_unit(), source_name,
                f + ".coupling_nT_per_unit", inf);
  }
}

proto::SensorCalibration ParseSensorText(const std::string& text,
                                         const std::string& source_name) {
  proto::SensorCalibration cal = ParseVersionedText<proto::SensorCalibration>(
      text, source_name, kSensorSchemaVersion, "sensor calibration");
  CheckSensorCalibration(cal, source_name);
  return cal;
}

proto::SensorCalibration ReadSensorFile(const std::string& path) {
  return ParseSensorText(ReadTextFile(path, "sensor calibration"), path);
}

std::string FormatSensorText(const proto::SensorCalibration& cal) {
  google::protobuf::TextFormat::Printer printer;
  std::string body;
  if (!printer.PrintToString(cal, &body)) {
    throw std::runtime_error("cannot format the sensor calibration");
  }
  return std::string(kHeader) + body;
}

void WriteSensorFile(const std::string& path,
                     const proto::SensorCalibration& cal) {
  proto::SensorCalibration copy = cal;
  if (copy.schema_version() == 0) copy.set_schema_version(kSensorSchemaVersion);
  WriteTextFileAtomically(path, FormatSensorText(copy), "sensor calibration");
}

}  // namespace fluxtrim::io
