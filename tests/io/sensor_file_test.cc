// Tests of the sensor calibration file (io/sensor_file.h): round trip,
// version check and the errors a user sees for a bad file.

#include "io/sensor_file.h"

#include <cmath>
#include <fstream>
#include <string>

#include <gtest/gtest.h>

#include "io/error.h"

namespace fluxtrim::io {
namespace {

proto::SensorCalibration Sample() {
  proto::SensorCalibration c;
  c.mutable_gains()->set_x(1.0123456789012345);
  c.mutable_gains()->set_y(0.98);
  c.mutable_gains()->set_z(1.0);
  c.mutable_offsets_nt()->set_x(-41.25);
  c.mutable_nonorthogonality_deg()->set_y(0.3333333333333333);
  c.set_has_misalignment(true);
  c.mutable_misalignment_deg()->set_z(1.0 / 3.0);
  c.set_temperature_channel("t_mag");
  c.mutable_gain_tc_per_k()->set_x(2.5e-5);
  proto::AuxCoupling* a = c.add_aux();
  a->set_channel("i_motor");
  a->mutable_coupling_nt_per_unit()->set_z(4.75);
  c.set_reference("scalar sensor");
  c.set_schema_version(kSensorSchemaVersion);
  return c;
}

// The message a parse of text throws (empty when it parses).
std::string ErrorOf(const std::string& text) {
  try {
    ParseSensorText(text, "cal.sensor");
  } catch (const InputError& e) {
    return e.what();
  }
  return "";
}

TEST(SensorFile, WriteThenReadRoundTripsEveryDoubleExactly) {
  const std::string path = ::testing::TempDir() + "/round_trip.sensor";
  WriteSensorFile(path, Sample());
  const proto::SensorCalibration back = ReadSensorFile(path);
  EXPECT_EQ(back.gains().x(), Sample().gains().x());
  EXPECT_EQ(back.misalignment_deg().z(), Sample().misalignment_deg().z());
  EXPECT_EQ(back.nonorthogonality_deg().y(),
            Sample().nonorthogonality_deg().y());
  EXPECT_EQ(back.aux(0).channel(), "i_motor");
  EXPECT_EQ(back.SerializeAsString(), Sample().SerializeAsString());
}

TEST(SensorFile, TextStartsWithACommentThatStatesTheModel) {
  const std::string text = FormatSensorText(Sample());
  EXPECT_EQ(text.rfind("# fluxtrim fluxgate sensor calibration", 0), 0u);
  EXPECT_NE(text.find("E = S P R B + o"), std::string::npos);
}

TEST(SensorFile, UnknownVersionIsRefusedNamingTheVersion) {
  proto::SensorCalibration c = Sample();
  c.set_schema_version(7);
  std::string text = FormatSensorText(c);
  text += "some_future_field: 3\n";
  const std::string e = ErrorOf(text);
  EXPECT_NE(e.find("cal.sensor"), std::string::npos) << e;
  EXPECT_NE(e.find("schema_version"), std::string::npos) << e;
  EXPECT_NE(e.find("version 7"), std::string::npos) << e;
}

TEST(SensorFile, MissingVersionIsRefused) {
  const std::string e = ErrorOf("gains { x: 1 y: 1 z: 1 }\n");
  EXPECT_NE(e.find("schema_version"), std::string::npos) << e;
  EXPECT_NE(e.find("missing"), std::string::npos) << e;
}

TEST(SensorFile, SyntaxErrorNamesLineAndColumn) {
  const std::string e =
      ErrorOf("schema_version: 1\ngains { x: 1 y: 1 z: 1 }\noffsets_nT { x: ]\n");
  EXPECT_NE(e.find("cal.sensor:3:"), std::string::npos) << e;
}

TEST(SensorFile, UnusableValuesAreRefusedNamingTheField) {
  EXPECT_NE(ErrorOf("schema_version: 1\ngains { x: 1 y: 0 z: 1 }\n")
                .find("gains.y"),
            std::string::npos);
  EXPECT_NE(ErrorOf("schema_version: 1\ngains { x: 1 y: 1 z: nan }\n")
                .find("gains.z"),
            std::string::npos);
  EXPECT_NE(ErrorOf("schema_version: 1\ngains { x: 1 y: 1 z: 1 }\n"
                    "nonorthogonality_deg { x: 60 }\n")
                .find("nonorthogonality_deg.x"),
            std::string::npos);
  EXPECT_NE(ErrorOf("schema_version: 1\ngains { x: 1 y: 1 z: 1 }\n"
                    "offset_tc_nT_per_K { x: 0.5 }\n")
                .find("temperature_channel"),
            std::string::npos);
  EXPECT_NE(ErrorOf("schema_version: 1\ngains { x: 1 y: 1 z: 1 }\n"
                    "aux { coupling_nT_per_unit { x: 1 } }\n")
                .find("aux[0].channel"),
            std::string::npos);
  EXPECT_EQ(ErrorOf("schema_version: 1\ngains { x: 1 y: 1 z: 1 }\n"), "");
}

TEST(SensorFile, MissingFileIsAnInputError) {
  EXPECT_THROW(ReadSensorFile(::testing::TempDir() + "/absent.sensor"),
               InputError);
}

}  // namespace
}  // namespace fluxtrim::io
