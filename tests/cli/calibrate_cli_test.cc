// End-to-end tests of `fluxtrim calibrate`: the real binary (FLUXTRIM_EXE)
// on small CSV recordings written here. The recordings are synthesised from
// WMM2025 (models/wmm.h), random attitudes and the forward sensor model
// (models/fluxgate_sensor.h, form of Merayo et al. 2000, from memory), so the
// true calibration is known.

#include <sys/wait.h>

#include <cmath>
#include <cstdio>
#include <fstream>
#include <random>
#include <sstream>
#include <string>

#include <Eigen/Geometry>
#include <google/protobuf/util/json_util.h>
#include <gtest/gtest.h>

#include "io/error.h"
#include "io/sensor_file.h"
#include "models/fluxgate_sensor.h"
#include "models/wmm.h"
#include "proto/calibration_summary.pb.h"

namespace {

using fluxtrim::models::SensorCalibration;
constexpr double kDeg = 3.14159265358979323846 / 180.0;
constexpr double kLat = -33.2, kLon = 151.4, kAlt = 120.0;  // invented site
constexpr char kDate[] = "2027-03-15";

SensorCalibration Truth() {
  SensorCalibration c;
  c.gains[0] = 0.985;
  c.gains[1] = 1.015;
  c.gains[2] = 1.002;
  c.offsets_nT[0] = -44.0;
  c.offsets_nT[1] = 12.0;
  c.offsets_nT[2] = 30.0;
  c.nonorthogonality_rad[0] = -0.4 * kDeg;
  c.nonorthogonality_rad[1] = 0.25 * kDeg;
  c.nonorthogonality_rad[2] = 0.1 * kDeg;
  c.misalignment_rad[2] = 1.0 * kDeg;
  return c;
}

enum class Motion { kTumble, kOneHeading };

// Writes a CSV recording; returns its path.
std::string WriteRecording(const std::string& name, Motion motion, bool f,
                           bool attitude, std::size_t n = 6000) {
  const double year =
      fluxtrim::models::ParseDecimalYear(kDate);
  const fluxtrim::models::GeomagneticField g =
      fluxtrim::models::MagneticModel::Wmm2025().Field(kLat, kLon, kAlt, year);
  const Eigen::Vector3d ned(g.x_nT, g.y_nT, g.z_nT);
  std::mt19937 rng(7);
  std::normal_distribution<double> gauss(0.0, 1.0);
  const std::string path = ::testing::TempDir() + "/" + name;
  std::ofstream out(path);
  out << "time,bx,by,bz,lat,lon,alt";
  if (f) out << ",f";
  if (attitude) out << ",roll,pitch,heading";
  out << "\n";
  char line[512];
  for (std::size_t i = 0; i < n; ++i) {
    double roll = 0, pitch = 0, heading = 30 * kDeg;
    if (motion == Motion::kTumble) {
      Eigen::Quaterniond q(gauss(rng), gauss(rng), gauss(rng), gauss(rng));
      q.normalize();
      const Eigen::Vector3d e = q.toRotationMatrix().eulerAngles(2, 1, 0);
      heading = e(0);
      pitch = e(1);
      roll = e(2);
    }
    const Eigen::Matrix3d c =
        (Eigen::AngleAxisd(heading, Eigen::Vector3d::UnitZ()) *
         Eigen::AngleAxisd(pitch, Eigen::Vector3d::UnitY()) *
         Eigen::AngleAxisd(roll, Eigen::Vector3d::UnitX()))
            .toRotationMatrix();
    const Eigen::Vector3d b = c.transpose() * ned;
    const fluxtrim::models::Vec3 e =
        fluxtrim::models::SensorRaw(Truth(), {b.x(), b.y(), b.z()});
    std::snprintf(line, sizeof line, "%.2f,%.4f,%.4f,%.4f,%.6f,%.6f,%.2f",
                  0.1 * static_cast<double>(i), e.x + 0.2 * gauss(rng),
                  e.y + 0.2 * gauss(rng), e.z + 0.2 * gauss(rng), kLat, kLon,
                  kAlt);
    out << line;
    if (f) {
      std::snprintf(line, sizeof line, ",%.4f", b.norm());
      out << line;
    }
    if (attitude) {
      std::snprintf(line, sizeof line, ",%.6f,%.6f,%.6f", roll / kDeg,
                    pitch / kDeg, heading / kDeg);
      out << line;
    }
    out << "\n";
  }
  return path;
}

struct CliRun {
  int exit_code = -1;
  std::string out;  // stdout and stderr
};

CliRun Calibrate(const std::string& args) {
  const std::string log = ::testing::TempDir() + "/calibrate_cli.log";
  const std::string cmd =
      std::string(FLUXTRIM_EXE) + " calibrate " + args + " > " + log + " 2>&1";
  const int status = std::system(cmd.c_str());
  CliRun r;
  r.exit_code = WIFEXITED(status) ? WEXITSTATUS(status) : -1;
  std::ifstream in(log);
  std::stringstream ss;
  ss << in.rdbuf();
  r.out = ss.str();
  return r;
}

std::string Slurp(const std::string& path) {
  std::ifstream in(path);
  std::stringstream ss;
  ss << in.rdbuf();
  return ss.str();
}

bool Exists(const std::string& path) { return std::ifstream(path).good(); }

TEST(CalibrateCli, ScalarCalibrationWritesTheFileAndTheJson) {
  const std::string rec =
      WriteRecording("cal_scalar.csv", Motion::kTumble, true, false);
  const std::string sensor = ::testing::TempDir() + "/scalar.sensor";
  const std::string json = ::testing::TempDir() + "/scalar.json";
  std::remove(sensor.c_str());
  const CliRun r =
      Calibrate(rec + " -o " + sensor + " --summary-json " + json);
  ASSERT_EQ(r.exit_code, 0) << r.out;
  EXPECT_NE(r.out.find("E = S P R B + o"), std::string::npos) << r.out;
  EXPECT_NE(r.out.find("not determined (magnitude-only calibration)"),
            std::string::npos);
  EXPECT_NE(r.out.find("pilot in command"), std::string::npos);
  const fluxtrim::proto::SensorCalibration cal =
      fluxtrim::io::ReadSensorFile(sensor);
  EXPECT_FALSE(cal.has_misalignment());
  EXPECT_EQ(cal.reference(), "scalar sensor");
  // Acceptance limits of issue 6: gains to 0.05 %, offsets to 1 nT.
  EXPECT_NEAR(cal.gains().x(), Truth().gains[0], 5e-4);
  EXPECT_NEAR(cal.offsets_nt().y(), Truth().offsets_nT[1], 1.0);
  EXPECT_NEAR(cal.nonorthogonality_deg().x(), -0.4, 0.02);

  const std::string text = Slurp(json);
  // Magnitude only: misalignment_deg absent from the JSON.
  EXPECT_EQ(text.find("\"misalignment_deg\""), std::string::npos) << text;
  fluxtrim::proto::CalibrationSummary s;
  ASSERT_TRUE(google::protobuf::util::JsonStringToMessage(text, &s).ok());
  EXPECT_TRUE(s.accepted());
  EXPECT_GT(s.residual_rms_before_nt(), s.residual_rms_after_nt());
  EXPECT_EQ(s.coverage().eigenvalues_size(), 3);
  EXPECT_GT(s.coverage().fraction(), 0.9);
  EXPECT_NEAR(s.gains().x(), cal.gains().x(), 1e-12);
  for (const char* key :
       {"\"residual_rms_before_nT\"", "\"residual_rms_after_nT\"",
        "\"gains\"", "\"offsets_nT\"", "\"nonorthogonality_deg\"",
        "\"gains_std_error\"", "\"offsets_std_error_nT\"",
        "\"nonorthogonality_std_error_deg\"", "\"coverage\""}) {
    EXPECT_NE(text.find(key), std::string::npos) << key;
  }
}

TEST(CalibrateCli, AttitudeMakesItAVectorCalibrationWithMisalignment) {
  const std::string rec =
      WriteRecording("cal_vector.csv", Motion::kTumble, false, true);
  const std::string sensor = ::testing::TempDir() + "/vector.sensor";
  const std::string json = ::testing::TempDir() + "/vector.json";
  const CliRun r = Calibrate(rec + " -o " + sensor + " --date " + kDate +
                          " --summary-json " + json);
  ASSERT_EQ(r.exit_code, 0) << r.out;
  const fluxtrim::proto::SensorCalibration cal =
      fluxtrim::io::ReadSensorFile(sensor);
  EXPECT_TRUE(cal.has_misalignment());
  EXPECT_EQ(cal.mode(), "vector");
  // 1 degree about z, recovered to 0.05 degree (issue 6).
  EXPECT_NEAR(cal.misalignment_deg().z(), 1.0, 0.05);
  EXPECT_NE(Slurp(json).find("\"misalignment_deg\""), std::string::npos);
  EXPECT_NE(r.out.find("crustal"), std::string::npos) << r.out;
}

TEST(CalibrateCli, OneHeadingIsRefusedWithExitOneAndWhatToFly) {
  const std::string rec =
      WriteRecording("cal_one_heading.csv", Motion::kOneHeading, true, false);
  const std::string sensor = ::testing::TempDir() + "/refused.sensor";
  std::remove(sensor.c_str());
  const CliRun r = Calibrate(rec + " -o " + sensor);
  EXPECT_EQ(r.exit_code, 1) << r.out;
  EXPECT_NE(r.out.find("REFUSED"), std::string::npos) << r.out;
  EXPECT_NE(r.out.find("turn through every heading"), std::string::npos);
  EXPECT_FALSE(Exists(sensor));
}

TEST(CalibrateCli, MissingDateWithoutScalarSensorIsAUsageError) {
  const std::string rec =
      WriteRecording("cal_no_f.csv", Motion::kTumble, false, false, 200);
  const CliRun r = Calibrate(rec + " -o " + ::testing::TempDir() + "/x.sensor");
  EXPECT_EQ(r.exit_code, 2) << r.out;
  EXPECT_NE(r.out.find("--date"), std::string::npos) << r.out;
}

TEST(CalibrateCli, BadInputExitsOneNamingTheFile) {
  const std::string missing = ::testing::TempDir() + "/no_such_file.csv";
  CliRun r = Calibrate(missing + " -o " + ::testing::TempDir() + "/x.sensor");
  EXPECT_EQ(r.exit_code, 1) << r.out;
  EXPECT_NE(r.out.find("no_such_file.csv"), std::string::npos) << r.out;

  const std::string bad = ::testing::TempDir() + "/cal_no_bz.csv";
  std::ofstream(bad) << "time,bx,by,f\n0,1,2,3\n";
  r = Calibrate(bad + " -o " + ::testing::TempDir() + "/x.sensor");
  EXPECT_EQ(r.exit_code, 1) << r.out;
  EXPECT_NE(r.out.find("bz"), std::string::npos) << r.out;
}

TEST(CalibrateCli, ConflictingModesAreAUsageError) {
  const CliRun r = Calibrate("whatever.csv -o x.sensor --vector --scalar --date " +
                          std::string(kDate));
  EXPECT_EQ(r.exit_code, 2) << r.out;
}


// Issue 6: "--aux COL accepted in calibrate too; their coupling vectors (nT
// per unit) reported". The demo drone's motor current couples at
// (0.22, -0.28, 0.19) nT/A, |g| = 0.41 nT/A (flights/demo_drone_cal.scenario).
TEST(CalibrateCli, AuxCouplingsOfTheDemoDroneAreReportedInTextFileAndJson) {
  const std::string rec =
      std::string(FLUXTRIM_SOURCE_DIR) + "/flights/demo_drone_cal.csv";
  const std::string sensor = ::testing::TempDir() + "/drone_aux.sensor";
  const std::string json = ::testing::TempDir() + "/drone_aux.json";
  const CliRun r = Calibrate(rec + " -o " + sensor +
                             " --date 2025-06-16 --aux i_motor --summary-json " +
                             json);
  ASSERT_EQ(r.exit_code, 0) << r.out;
  EXPECT_NE(r.out.find("aux i_motor"), std::string::npos) << r.out;
  EXPECT_NE(r.out.find("nT/unit"), std::string::npos) << r.out;
  const fluxtrim::proto::SensorCalibration cal =
      fluxtrim::io::ReadSensorFile(sensor);
  ASSERT_EQ(cal.aux_size(), 1);
  EXPECT_EQ(cal.aux(0).channel(), "i_motor");
  const std::string text = Slurp(json);
  fluxtrim::proto::CalibrationSummary s;
  ASSERT_TRUE(google::protobuf::util::JsonStringToMessage(text, &s).ok());
  ASSERT_EQ(s.aux_size(), 1);
  const fluxtrim::proto::Vector3& g = s.aux(0).coupling_nt_per_unit();
  const fluxtrim::proto::Vector3& e = s.aux(0).std_error_nt_per_unit();
  const double norm = std::sqrt(g.x() * g.x() + g.y() * g.y() + g.z() * g.z());
  // The WMM2025 reference leaves geology and diurnal variation in the
  // residual and the current follows the tilt, so the coupling is biased
  // (measured |g| = 0.51 nT/A): a factor-of-two window around the truth
  // (our choice) checks sign and scale, and the standard errors are given.
  EXPECT_GT(norm, 0.41 / 2);
  EXPECT_LT(norm, 0.41 * 2);
  EXPECT_GT(g.x(), 0);
  EXPECT_LT(g.y(), 0);
  EXPECT_GT(g.z(), 0);
  EXPECT_GT(e.x(), 0);
  EXPECT_GT(e.y(), 0);
  EXPECT_GT(e.z(), 0);
}

}  // namespace
