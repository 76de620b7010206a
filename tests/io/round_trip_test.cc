// One suite over every recording format, through the format dispatch
// (CreateRecordingWriter / OpenRecording, chosen by file extension): a table
// written and read back through a chain of formats keeps every value bit for
// bit, NaN positions included, with the awkward values of binary64 (IEEE
// 754-2008): -0.0, subnormals, the extremes, 0.1 + 0.2, values that need all
// 17 significant digits, random bit patterns.

#include <unistd.h>

#include <cfloat>
#include <cmath>
#include <cstdio>
#include <cstdint>
#include <cstring>
#include <limits>
#include <memory>
#include <random>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "io/recording.h"
#include "io/table.h"

namespace fluxtrim::io {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// Rows: more than one CSV/frames chunk of the readers' first reads, fast
// enough under the sanitizers.
constexpr std::size_t kRandomRows = 3000;

std::uint64_t Bits(double v) {
  std::uint64_t b;
  std::memcpy(&b, &v, sizeof b);
  return b;
}

// Values that stress decimal conversion; all finite (infinities are text
// under a policy, not data) and none equal to the GDF2 null (-1e100).
std::vector<double> AwkwardValues() {
  return {-0.0,
          0.0,
          0.1 + 0.2,
          1.0 / 3.0,
          5e-324,                   // smallest subnormal
          2.2250738585072009e-308,  // largest subnormal
          2.2250738585072014e-308,  // smallest normal (DBL_MIN)
          -DBL_MIN,
          1e-310,
          1e300,
          -1e300,
          DBL_MAX,
          -DBL_MAX,
          1e23,
          9007199254740993.0,  // 2^53 + 1 rounds to 2^53
          0.12345678901234568,
          123456789.12345678,
          48213.270000000004,
          -31.952341700000001,
          1.0000000000000002,
          0.99999999999999989,
          std::nextafter(-1e100, 0.0),  // neighbours of the GDF2 null
          std::nextafter(-1e100, -DBL_MAX)};
}

Table MakeTable() {
  Table t({{"time", "s", "seconds of day"},
           {"bx", "nT", "fluxgate x"},
           {"gappy", "", ""},
           {"i_motor", "A", "motor current"}});
  std::mt19937_64 rng(1142);
  const std::vector<double> awkward = AwkwardValues();
  const std::size_t rows = awkward.size() + kRandomRows;
  double time = 35012.3;
  for (std::size_t r = 0; r < rows; ++r) {
    // Increasing times with awkward steps.
    time = r % 3 == 0 ? time + 0.1 : std::nextafter(time, 1e9);
    t.Column("time").push_back(time);
    double v;
    if (r < awkward.size()) {
      v = awkward[r];
    } else {
      do {
        const std::uint64_t b = rng();
        std::memcpy(&v, &b, sizeof v);
      } while (!std::isfinite(v) || v == -1e100);
    }
    t.Column("bx").push_back(v);
    t.Column("gappy").push_back(r % 5 == 2 ? kNaN : -v);
    t.Column("i_motor").push_back(r % 7 == 0 ? kNaN
                                             : 0.1 * static_cast<double>(r));
  }
  return t;
}

struct Chain {
  const char* name;
  std::vector<std::string> extensions;
};

std::ostream& operator<<(std::ostream& os, const Chain& chain) {
  return os << chain.name;
}

class RoundTrip : public ::testing::TestWithParam<Chain> {};

TEST_P(RoundTrip, KeepsEveryValueBitForBitThroughTheChain) {
  const Table original = MakeTable();
  const Chain& chain = GetParam();
  Table current = original;
  bool long_names_kept = true;
  std::vector<std::string> written;
  for (std::size_t step = 0; step < chain.extensions.size(); ++step) {
    const std::string& ext = chain.extensions[step];
    const std::string path = ::testing::TempDir() + "round_trip_" +
                             std::to_string(::getpid()) + "_" + chain.name +
                             "_" + std::to_string(step) + ext;
    WriteOptions options;
    options.comment = "round trip step " + std::to_string(step);
    WriteRecording(path, current, options);
    // GDF2 can be opened by either file of the pair.
    const std::string open_path =
        ext == ".dfn" && step % 2 == 1 ? path.substr(0, path.size() - 4) + ".dat"
                                       : path;
    current = ReadRecording(open_path);
    // CSV has no place for long names.
    long_names_kept = long_names_kept && FormatFromPath(path) != Format::kCsv;
    written.push_back(path);
    if (FormatFromPath(path) == Format::kGdf2) {
      written.push_back(path.substr(0, path.size() - 4) +
                        (ext == ".dfn" ? ".dat" : ".DAT"));
    }
  }
  for (const std::string& path : written) std::remove(path.c_str());

  ASSERT_EQ(current.cols(), original.cols());
  ASSERT_EQ(current.rows(), original.rows());
  for (std::size_t c = 0; c < original.cols(); ++c) {
    const Channel& want = original.channel(c);
    const int index = current.Find(want.info.name);
    ASSERT_GE(index, 0) << want.info.name;
    const Channel& got = current.channel(static_cast<std::size_t>(index));
    EXPECT_EQ(got.info.unit, want.info.unit) << want.info.name;
    if (long_names_kept) {
      EXPECT_EQ(got.info.long_name, want.info.long_name) << want.info.name;
    }
    for (std::size_t r = 0; r < want.values.size(); ++r) {
      if (std::isnan(want.values[r])) {
        ASSERT_TRUE(std::isnan(got.values[r]))
            << want.info.name << " row " << r << ": NaN became "
            << got.values[r];
      } else {
        ASSERT_EQ(Bits(got.values[r]), Bits(want.values[r]))
            << want.info.name << " row " << r << ": " << want.values[r]
            << " became " << got.values[r];
      }
    }
  }
}

INSTANTIATE_TEST_SUITE_P(
    EveryFormat, RoundTrip,
    ::testing::Values(
        Chain{"csv", {".csv"}}, Chain{"gdf2", {".dfn"}},
        Chain{"frames", {".ftrec"}},
        Chain{"csv_gdf2_frames_csv", {".csv", ".dfn", ".ftrec", ".csv"}},
        Chain{"frames_gdf2_gdf2_csv_frames",
              {".ftrec", ".dfn", ".dfn", ".csv", ".ftrec"}},
        Chain{"upper_case_extensions", {".CSV", ".DFN", ".FTREC"}}),
    [](const ::testing::TestParamInfo<Chain>& info) {
      return std::string(info.param.name);
    });

}  // namespace
}  // namespace fluxtrim::io
