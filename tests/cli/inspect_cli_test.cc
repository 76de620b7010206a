// `fluxtrim inspect` on the same recording in each supported format (CSV,
// ASEG-GDF2, protobuf frames), through the real binary: the summary must
// not depend on the format (the recording is converted here with the io
// library, whose round trip is bit for bit: tests/io/round_trip_test).

#include <sys/wait.h>

#include <cstdlib>
#include <fstream>
#include <sstream>
#include <string>

#include <google/protobuf/util/json_util.h>
#include <gtest/gtest.h>

#include "io/recording.h"
#include "proto/inspect.pb.h"

namespace {

const std::string kFlights = std::string(FLUXTRIM_SOURCE_DIR) + "/flights/";

std::string Slurp(const std::string& path) {
  std::ifstream in(path);
  std::stringstream s;
  s << in.rdbuf();
  return s.str();
}

fluxtrim::proto::InspectSummary Inspect(const std::string& path) {
  // Outputs go to the test's own temp dir, never beside the input.
  const std::string base = path.substr(path.find_last_of('/') + 1);
  const std::string json = ::testing::TempDir() + base + ".json";
  const std::string log = ::testing::TempDir() + base + ".log";
  const std::string cmd = std::string(FLUXTRIM_EXE) + " inspect " + path +
                          " --json " + json + " > " + log + " 2>&1";
  const int status = std::system(cmd.c_str());
  EXPECT_TRUE(WIFEXITED(status) && WEXITSTATUS(status) == 0) << Slurp(log);
  fluxtrim::proto::InspectSummary s;
  EXPECT_TRUE(google::protobuf::util::JsonStringToMessage(Slurp(json), &s).ok())
      << path;
  return s;
}

TEST(InspectCli, EveryFormatGivesTheSameSummary) {
  const fluxtrim::io::Table box =
      fluxtrim::io::ReadRecording(kFlights + "demo_box.csv");
  const std::string gdf2 = ::testing::TempDir() + "box.dfn";
  const std::string frames = ::testing::TempDir() + "box.ftrec";
  fluxtrim::io::WriteRecording(gdf2, box);
  fluxtrim::io::WriteRecording(frames, box);

  const auto csv_summary = Inspect(kFlights + "demo_box.csv");
  ASSERT_EQ(csv_summary.samples(), box.rows());
  ASSERT_GT(csv_summary.channels_size(), 4);
  for (const std::string& path : {gdf2, frames}) {
    SCOPED_TRACE(path);
    const auto s = Inspect(path);
    EXPECT_EQ(s.samples(), csv_summary.samples());
    EXPECT_EQ(s.sample_rate_hz(), csv_summary.sample_rate_hz());
    EXPECT_EQ(s.duration_s(), csv_summary.duration_s());
    ASSERT_EQ(s.channels_size(), csv_summary.channels_size());
    for (int c = 0; c < s.channels_size(); ++c) {
      EXPECT_EQ(s.channels(c).name(), csv_summary.channels(c).name());
      EXPECT_EQ(s.channels(c).min(), csv_summary.channels(c).min());
      EXPECT_EQ(s.channels(c).max(), csv_summary.channels(c).max());
    }
    // The compensation box is found in every format.
    EXPECT_EQ(s.maneuvers_size(), csv_summary.maneuvers_size());
  }
  EXPECT_EQ(csv_summary.maneuvers_size(), 12);
}

TEST(InspectCli, ReadsTheDemoGdf2Recording) {
  const auto s = Inspect(kFlights + "demo_drone_grid.dfn");
  const fluxtrim::io::Table grid =
      fluxtrim::io::ReadRecording(kFlights + "demo_drone_grid.dfn");
  EXPECT_EQ(s.samples(), grid.rows());
  EXPECT_NEAR(s.sample_rate_hz(), 10.0, 1e-6);
}

}  // namespace
