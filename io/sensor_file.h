#pragma once
// The fluxgate sensor calibration file: protobuf text format of
// fluxtrim.proto.SensorCalibration (io/proto/sensor.proto), versioned by
// schema_version. Written by `calibrate`; read by fit, apply and stream
// (and embedded in the compensation model).
//
// Units in the file: gains dimensionless (1 = perfect), offsets nT, angles
// degrees, temperature coefficients 1/K and nT/K, aux couplings nT per unit
// of the channel. Forward model E = S P R B + o (models/fluxgate_sensor.h).

#include <string>

#include "proto/sensor.pb.h"

namespace fluxtrim::io {

// Schema version this build writes and reads.
inline constexpr unsigned kSensorSchemaVersion = 1;

// Parses calibration text. Throws InputError naming source_name and
//  - line and column for a syntax error or an unknown field;
//  - "field schema_version" when it is missing or not kSensorSchemaVersion;
//  - the field for unusable values: gains not finite and positive,
//    offsets or coefficients not finite, |angle| >= 45 deg (then P or R
//    would be near-singular or the axes mislabelled), an aux coupling
//    without a channel name, temperature coefficients without a channel.
proto::SensorCalibration ParseSensorText(const std::string& text,
                                         const std::string& source_name);

// Reads a calibration file (InputError when it cannot be opened; see above).
proto::SensorCalibration ReadSensorFile(const std::string& path);

// The content checks of ParseSensorText, for a calibration that came another
// way (e.g. embedded in a model file). place prefixes the field names.
void CheckSensorCalibration(const proto::SensorCalibration& cal,
                            const std::string& source_name,
                            const std::string& place = "");

// Text form with a comment header that states the model and the units.
// Round-trips every double exactly.
std::string FormatSensorText(const proto::SensorCalibration& cal);

// Writes FormatSensorText to path atomically (a temporary file renamed into
// place), setting schema_version to kSensorSchemaVersion when it is 0.
// Throws std::runtime_error naming the path on failure.
void WriteSensorFile(const std::string& path,
                     const proto::SensorCalibration& cal);

}  // namespace fluxtrim::io
