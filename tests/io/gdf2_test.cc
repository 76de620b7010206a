// ASEG-GDF2 reader and writer: the sample files of tests/io/data/gdf2 (each a
// layout met in the wild, see the README there), chunked reading, renaming,
// and the bit-for-bit round trip of the writer.
//
// Expected values are the decimal text of the sample files (the source of a
// parsed number is the file itself); the writer's text is checked with
// Python's float(), an independent decimal parser.

#include "io/gdf2.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <cstdio>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <limits>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include "io/error.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::io {
namespace {

namespace fs = std::filesystem;

const std::string kData = std::string(FLUXTRIM_SOURCE_DIR) +
                          "/tests/io/data/gdf2/";

Table ReadAll(RecordingReader& reader, std::size_t chunk_rows = 1000) {
  Table all(reader.channels());
  Table chunk;
  while (reader.ReadChunk(&chunk, chunk_rows) > 0) all.Append(chunk);
  return all;
}

Table ReadFile(const std::string& path, const ReadOptions& options = {}) {
  auto reader = OpenGdf2Reader(path, options);
  return ReadAll(*reader);
}

std::uint64_t Bits(double v) {
  std::uint64_t b;
  std::memcpy(&b, &v, sizeof(b));
  return b;
}

// A fresh directory under the system temp dir, removed at the end.
class TempDir {
 public:
  TempDir() {
    std::random_device rd;
    path_ = fs::temp_directory_path() /
            ("fluxtrim_gdf2_" + std::to_string(rd()) + std::to_string(rd()));
    fs::create_directories(path_);
  }
  ~TempDir() {
    std::error_code ec;
    fs::remove_all(path_, ec);
  }
  std::string File(const std::string& name) const {
    return (path_ / name).string();
  }

 private:
  fs::path path_;
};

std::string Slurp(const std::string& path) {
  std::ifstream in(path, std::ios::binary);
  std::ostringstream s;
  s << in.rdbuf();
  return s.str();
}

void WriteText(const std::string& path, const std::string& text) {
  std::ofstream out(path, std::ios::binary);
  out << text;
}

TEST(Gdf2Reader, ReadsTheConventionalLayoutWithRecordTypesAndComments) {
  ReadOptions options;
  options.rename["time"] = "FIDTIME";
  auto reader = OpenGdf2Reader(kData + "bw1142_box.dfn", options);
  const Table t = ReadAll(*reader);

  // Channels as defined in bw1142_box.dfn, RT:A4 excluded, FIDTIME renamed.
  const std::vector<std::string> names = {"LINE", "time", "LAT",
                                          "LON",  "GPSALT", "MAGRAW",
                                          "BX",   "BY",     "BZ"};
  ASSERT_EQ(t.cols(), names.size());
  for (std::size_t i = 0; i < names.size(); ++i) {
    EXPECT_EQ(t.channel(i).info.name, names[i]);
  }
  ASSERT_EQ(t.rows(), 6u);  // six DATA lines in bw1142_box.dat
  EXPECT_EQ(t.channel(1).info.unit, "s");
  EXPECT_EQ(t.channel(1).info.long_name, "Seconds since midnight UTC");
  EXPECT_EQ(t.channel(5).info.unit, "nT");

  // Values as written in bw1142_box.dat (decimal text -> nearest double).
  EXPECT_EQ(t.Column("LINE")[0], 1010.0);
  EXPECT_EQ(t.Column("time")[0], 37800.00);
  EXPECT_EQ(t.Column("time")[5], 37800.50);
  EXPECT_EQ(t.Column("LAT")[1], -31.4512401);
  EXPECT_EQ(t.Column("LON")[2], 118.2035258);
  EXPECT_EQ(t.Column("BZ")[5], -53013.09);
  // Nulls: GPSALT -9999.99 on the 4th data line, MAGRAW -99999.999 on the
  // 5th (NULL= of each field in the .dfn).
  EXPECT_TRUE(std::isnan(t.Column("GPSALT")[3]));
  EXPECT_TRUE(std::isnan(t.Column("MAGRAW")[4]));
  EXPECT_EQ(t.Column("MAGRAW")[3], 57123.655);

  auto* gdf2 = dynamic_cast<Gdf2Reader*>(reader.get());
  ASSERT_NE(gdf2, nullptr);
  EXPECT_TRUE(gdf2->definition().has_record_type);
  EXPECT_EQ(gdf2->definition().record_width, 98u);  // 4+8+3*12+9+11+3*10
  EXPECT_EQ(gdf2->skipped_lines(), 3u);               // three COMM lines
  EXPECT_TRUE(gdf2->skipped_text_fields().empty());
}

TEST(Gdf2Reader, ReadsAnExportWithoutRecordTypeAndWithFortranExponents) {
  const Table t = ReadFile(kData + "bw1142_comp.dat");
  ASSERT_EQ(t.cols(), 5u);
  ASSERT_EQ(t.rows(), 5u);
  EXPECT_EQ(t.Column("LINE")[4], 2001.0);
  EXPECT_EQ(t.Column("time")[1], 51200.200);
  EXPECT_EQ(t.Column("MAG")[0], 5.70811235E+04);
  EXPECT_EQ(t.Column("HEADING")[0], 9.025000E+01);  // "9.025000D+01"
  EXPECT_EQ(t.Column("HEADING")[4], -1.791250E+02);
  EXPECT_EQ(t.Column("CURRENT")[2], 13.0);          // G12.4 wrote "13"
  // NULL=-1.0E+32 written as -1.00000000E+32 and -1.0000E+32: the same
  // number, so a null.
  EXPECT_TRUE(std::isnan(t.Column("MAG")[2]));
  EXPECT_TRUE(std::isnan(t.Column("CURRENT")[4]));
  // A blank field is a null.
  EXPECT_TRUE(std::isnan(t.Column("HEADING")[3]));
  EXPECT_EQ(t.channel(4).info.long_name, "Avionics bus current");
  EXPECT_EQ(t.channel(4).info.unit, "A");
}

TEST(Gdf2Reader, ReadsUpperCaseCrlfFilesWithArraysTextAndTouchingFields) {
  auto reader = OpenGdf2Reader(kData + "BW1142_SPEC.DAT", {});
  const Table t = ReadAll(*reader);
  const std::vector<std::string> names = {"TIME", "FLUXGATE_0", "FLUXGATE_1",
                                          "FLUXGATE_2", "F"};
  ASSERT_EQ(t.cols(), names.size());
  for (std::size_t i = 0; i < names.size(); ++i) {
    EXPECT_EQ(t.channel(i).info.name, names[i]);
  }
  ASSERT_EQ(t.rows(), 4u);
  // "  71000.02024-03-11-12345.67 23456.78-34567.89 57080.125": TIME, the
  // skipped DATE and the fluxgate values touch.
  EXPECT_EQ(t.Column("time")[0], 71000.0);
  EXPECT_EQ(t.Column("FLUXGATE_0")[0], -12345.67);
  EXPECT_EQ(t.Column("FLUXGATE_1")[0], 23456.78);
  EXPECT_EQ(t.Column("FLUXGATE_2")[0], -34567.89);
  EXPECT_EQ(t.Column("F")[2], 57080.375);
  EXPECT_TRUE(std::isnan(t.Column("FLUXGATE_1")[2]));  // '*' fill null
  EXPECT_TRUE(std::isnan(t.Column("F")[3]));           // -99999.999 null
  EXPECT_EQ(t.channel(1).info.unit, "nT");
  EXPECT_EQ(t.channel(1).info.long_name, "Fluxgate X Y Z");

  auto* gdf2 = dynamic_cast<Gdf2Reader*>(reader.get());
  ASSERT_NE(gdf2, nullptr);
  EXPECT_EQ(gdf2->skipped_text_fields(), std::vector<std::string>{"DATE"});
  EXPECT_EQ(gdf2->definition().fields[2].comment, "body frame");
  EXPECT_EQ(gdf2->definition().fields[2].repeat, 3);
}

TEST(Gdf2Reader, OpensThePairFromEitherFileAndEitherExtensionCase) {
  const Table from_dfn = ReadFile(kData + "bw1142_comp.dfn");
  const Table from_dat = ReadFile(kData + "bw1142_comp.dat");
  ASSERT_EQ(from_dfn.rows(), from_dat.rows());
  EXPECT_EQ(Bits(from_dfn.Column("MAG")[4]), Bits(from_dat.Column("MAG")[4]));

  // Lower-case .dfn beside an upper-case .DAT.
  TempDir dir;
  fs::copy_file(kData + "bw1142_comp.dfn", dir.File("mixed.dfn"));
  fs::copy_file(kData + "bw1142_comp.dat", dir.File("mixed.DAT"));
  EXPECT_EQ(ReadFile(dir.File("mixed.dfn")).rows(), 5u);
  EXPECT_EQ(ReadFile(dir.File("mixed.DAT")).rows(), 5u);
}

TEST(Gdf2Reader, DeliversChunksOfAtMostTheRequestedRows) {
  ReadOptions options;
  options.rename["time"] = "FIDTIME";
  auto reader = OpenGdf2Reader(kData + "bw1142_box.dat", options);
  Table chunk;
  EXPECT_EQ(reader->ReadChunk(&chunk, 4), 4u);
  EXPECT_EQ(chunk.rows(), 4u);
  EXPECT_EQ(chunk.Column("time")[0], 37800.00);
  EXPECT_EQ(reader->ReadChunk(&chunk, 4), 2u);
  EXPECT_EQ(chunk.rows(), 2u);
  EXPECT_EQ(chunk.Column("time")[0], 37800.40);  // 5th data line
  EXPECT_EQ(reader->ReadChunk(&chunk, 4), 0u);
  EXPECT_EQ(chunk.rows(), 0u);
}

TEST(Gdf2Reader, MapsFieldsLikeTheOtherFormats) {
  // io/channel_map.h: a swap works; an unmapped field carrying a mapped-to
  // name steps aside as <name>_orig.
  const std::string dfn =
      "DEFN 1 ST=RECD,RT=;TIME:F6.1;FIDTIME:F6.1;BX:F8.1;BY:F8.1\n";
  const std::string dat = "   1.0  10.0    11.0    22.0\n";
  std::istringstream d(dfn), a(dat);
  ReadOptions options;
  options.rename["time"] = "FIDTIME";
  options.rename["bx"] = "BY";
  options.rename["by"] = "BX";
  Gdf2Reader reader(d, "m.dfn", a, "m.dat", options);
  const Table t = ReadAll(reader);
  EXPECT_EQ(t.channel(0).info.name, "TIME_orig");
  EXPECT_EQ(t.Column("time")[0], 10.0);
  EXPECT_EQ(t.Column("bx")[0], 22.0);
  EXPECT_EQ(t.Column("by")[0], 11.0);
}

TEST(Gdf2Reader, AcceptsBackwardTimesWhenAsked) {
  const std::string dfn = "DEFN 1 ST=RECD,RT=;TIME:F6.1;MAG:F8.1\n";
  const std::string dat = "   1.0 50000.0\n   1.0 50001.0\n   0.5 50002.0\n";
  std::istringstream d(dfn), a(dat);
  ReadOptions options;
  options.time_order = TimeOrderPolicy::kAccept;
  Gdf2Reader reader(d, "t.dfn", a, "t.dat", options);
  const Table t = ReadAll(reader);
  ASSERT_EQ(t.rows(), 3u);
  EXPECT_EQ(t.Column("TIME")[2], 0.5);
}

TEST(Gdf2Reader, ReadsNonFiniteTextAsGapsUnderTheGapPolicy) {
  const std::string dfn = "DEFN 1 ST=RECD,RT=;TIME:F6.1;MAG:F8.1\n";
  const std::string dat = "   1.0     NaN\n   2.0    -inf\n   3.0********\n";
  std::istringstream d(dfn), a(dat);
  ReadOptions options;
  options.non_finite = NonFinitePolicy::kGap;
  Gdf2Reader reader(d, "t.dfn", a, "t.dat", options);
  const Table t = ReadAll(reader);
  ASSERT_EQ(t.rows(), 3u);
  for (double v : t.Column("MAG")) EXPECT_TRUE(std::isnan(v));
}

TEST(Gdf2Reader, ParsesDefinitionVariantsOfOneField) {
  // Each line defines the same field in another spelling met in files.
  const std::vector<std::string> variants = {
      "DEFN 2 ST=RECD,RT=;MAG:F10.3:UNIT=nT,NULL=-99999.999,NAME=Total field",
      "DEFN 2 ST=RECORD,RT=;MAG:f10.3:UNITS=nT:NULL=-99999.999:NAME=Total field",
      "DEFN ST=RECD,RT=;MAG:F10.3,UNIT=nT,NULL=-99999.999,NAME=Total field",
      "  defn   2  st = recd , rt = ;  MAG : F 10.3 : UNIT = nT , NULL = "
      "-99999.999 , NAME = Total field  ",
      "DEFN 2 ST=RECD,RT=;MAG:F10.3:NAME=Total field:UNIT=nT:NULL=-99999.999\r",
  };
  for (const std::string& v : variants) {
    std::istringstream in(v + "\n");
    const Gdf2Definition def = ParseGdf2Definition(in, "v.dfn");
    ASSERT_EQ(def.fields.size(), 1u) << v;
    const Gdf2Field& f = def.fields[0];
    EXPECT_EQ(f.name, "MAG") << v;
    EXPECT_EQ(f.kind, 'F') << v;
    EXPECT_EQ(f.width, 10) << v;
    EXPECT_EQ(f.decimals, 3) << v;
    EXPECT_EQ(f.unit, "nT") << v;
    EXPECT_EQ(f.null_text, "-99999.999") << v;
    EXPECT_EQ(f.long_name, "Total field") << v;
    EXPECT_EQ(def.record_width, 10u) << v;
  }
}

TEST(Gdf2Reader, StopsAtEndDefnAndSkipsOtherRecordTypes) {
  const std::string dfn =
      "DEFN   ST=RECD,RT=COMM;RT:A4;COMMENTS:A76\n"
      "DEFN 1 ST=RECD,RT=;RT:A4;TIME:F6.1\n"
      "DEFN 2 ST=RECD,RT=HEAD;RT:A4;TITLE:A40\n"
      "DEFN 3 ST=RECD,RT=;MAG:E12.4\n"
      "DEFN 4 ST=RECD,RT=;END DEFN\n"
      "this line is after the terminator and is not read\n";
  const std::string dat =
      "COMM comment\n"
      "HEAD  invented header record\n"
      "DATA   1.0  5.0000E+04\n"
      "\n"
      "DATA   2.0  5.0001E+04\n";
  std::istringstream d(dfn), a(dat);
  Gdf2Reader reader(d, "t.dfn", a, "t.dat", {});
  const Table t = ReadAll(reader);
  ASSERT_EQ(t.rows(), 2u);
  EXPECT_EQ(t.Column("MAG")[1], 5.0001E+04);
  EXPECT_EQ(reader.definition().other_record_types,
            (std::vector<std::string>{"COMM", "HEAD"}));
  EXPECT_EQ(reader.skipped_lines(), 3u);  // COMM, HEAD, blank
}

// --- Writer ---------------------------------------------------------------

std::vector<ChannelInfo> RoundTripSchema() {
  return {{"bx", "nT", "Fluxgate X"},
          {"time", "s", "Seconds since midnight"},
          {"f", "nT", ""},
          {"current", "", ""}};
}

// Doubles that stress a decimal round trip: signed zero, subnormals, the
// extremes, values near powers of ten, and random bit patterns.
std::vector<double> HardValues(std::size_t count) {
  std::vector<double> v = {0.0,
                           -0.0,
                           std::numeric_limits<double>::denorm_min(),
                           -std::numeric_limits<double>::denorm_min(),
                           4.9e-324,
                           2.2250738585072009e-308,  // largest subnormal
                           std::numeric_limits<double>::min(),
                           std::numeric_limits<double>::max(),
                           -std::numeric_limits<double>::max(),
                           1e300,
                           -1e300,
                           1e23,
                           0.1,
                           1.0 / 3.0,
                           57123.456,
                           9.999999999999999e22,
                           5e-324 * 3};
  std::mt19937_64 rng(20240311);
  while (v.size() < count) {
    const std::uint64_t b = rng();
    double d;
    std::memcpy(&d, &b, sizeof(d));
    v.push_back(d);  // NaN patterns included: they must stay NaN
  }
  return v;
}

TEST(Gdf2Writer, RoundTripsEveryDoubleBitForBit) {
  TempDir dir;
  // The second chunk crosses the writer's 4096-row flush.
  const std::size_t kRows = 5000;
  const std::vector<double> values = HardValues(kRows * 3);
  Table table(RoundTripSchema());
  for (std::size_t r = 0; r < kRows; ++r) {
    table.channel(0).values.push_back(values[r]);
    table.channel(1).values.push_back(static_cast<double>(r) * 0.1);
    table.channel(2).values.push_back(values[kRows + r]);
    table.channel(3).values.push_back(values[2 * kRows + r]);
  }
  // Infinities are tested separately (they follow the non-finite policy).
  for (std::size_t c = 0; c < table.cols(); ++c) {
    for (double& v : table.channel(c).values) {
      if (std::isinf(v)) v = 1.0;
    }
  }
  {
    auto writer = CreateGdf2Writer(dir.File("rt.dat"), table.Schema(), {});
    // Two chunks: the writer appends.
    Table first = table, second = table;
    first.Slice(0, 700);
    second.Slice(700, kRows);
    writer->Write(first);
    writer->Write(second);
    writer->Close();
  }
  const Table back = ReadFile(dir.File("rt.dfn"));
  ASSERT_EQ(back.rows(), kRows);
  ASSERT_EQ(back.cols(), 4u);
  EXPECT_EQ(back.channel(0).info.name, "time");  // time first
  for (std::size_t c = 0; c < table.cols(); ++c) {
    const auto& want = table.channel(c).values;
    const auto& got = back.Column(table.channel(c).info.name);
    for (std::size_t r = 0; r < kRows; ++r) {
      if (std::isnan(want[r])) {
        EXPECT_TRUE(std::isnan(got[r])) << c << " " << r;
      } else {
        EXPECT_EQ(Bits(got[r]), Bits(want[r]))
            << table.channel(c).info.name << " row " << r << ": " << want[r];
      }
    }
  }
  EXPECT_EQ(back.Column("bx")[1], -0.0);
  EXPECT_TRUE(std::signbit(back.Column("bx")[1]));
}

TEST(Gdf2Writer, WritesTextThatAnIndependentParserReadsToTheSameBits) {
  // Python's float() (correctly rounded, David Gay's algorithm) parses each
  // written field; its float.hex must equal the C++ value's %a.
  TempDir dir;
  const std::vector<double> values = HardValues(300);
  Table table({{"time", "s", ""}, {"v", "", ""}});
  std::vector<double> kept;
  for (std::size_t i = 0; i < values.size(); ++i) {
    if (!std::isfinite(values[i])) continue;
    table.channel(0).values.push_back(static_cast<double>(kept.size()));
    table.channel(1).values.push_back(values[i]);
    kept.push_back(values[i]);
  }
  {
    auto writer = CreateGdf2Writer(dir.File("py.dfn"), table.Schema(), {});
    writer->Write(table);
    writer->Close();
  }
  const std::string script =
      "import sys\n"
      "for line in open(sys.argv[1]):\n"
      "    if line.startswith('DATA'):\n"
      "        print(float(line[4+25:4+50]).hex())\n";
  WriteText(dir.File("parse.py"), script);
  const test_support::CommandResult run = test_support::RunCommand(
      std::string(FLUXTRIM_PYTHON) + " " + dir.File("parse.py") + " " +
      dir.File("py.dat"));
  std::istringstream lines(run.output);
  std::string hex;
  std::size_t i = 0;
  while (std::getline(lines, hex)) {
    ASSERT_LT(i, kept.size());
    // Python writes 0x1.8000000000000p+1, C++ %a 0x1.8p+1: compare values.
    const double py = std::strtod(hex.c_str(), nullptr);
    EXPECT_EQ(Bits(py), Bits(kept[i])) << hex << " vs " << kept[i];
    ++i;
  }
  EXPECT_EQ(i, kept.size()) << "python output: " << run.output.substr(0, 200);
}

TEST(Gdf2Writer, WritesTheConventionalDefinitionWithUnitsNamesAndNulls) {
  TempDir dir;
  WriteOptions options;
  options.comment =
      "Invented demo: Bellwether Aerogeophysics BW-1142, compensated with "
      "fluxtrim; this comment is long enough to be wrapped onto two lines\n"
      "second paragraph";
  Table table(RoundTripSchema());
  table.channel(0).values = {1.0, std::nan("")};
  table.channel(1).values = {0.0, 0.1};
  table.channel(2).values = {2.0, 3.0};
  table.channel(3).values = {4.0, 5.0};
  {
    auto writer = CreateGdf2Writer(dir.File("OUT.DAT"), table.Schema(), options);
    writer->Write(table);
    writer->Close();
  }
  ASSERT_TRUE(fs::exists(dir.File("OUT.DFN")));
  const std::string dfn = Slurp(dir.File("OUT.DFN"));
  EXPECT_NE(dfn.find("DEFN   ST=RECD,RT=COMM;RT:A4;COMMENTS:A76\n"),
            std::string::npos);
  EXPECT_NE(dfn.find("DEFN 1 ST=RECD,RT=;RT:A4\n"), std::string::npos);
  EXPECT_NE(dfn.find("DEFN 2 ST=RECD,RT=;time:E25.16:UNIT=s,NULL=" +
                     std::string(kGdf2DefaultNull) +
                     ",NAME=Seconds since midnight\n"),
            std::string::npos);
  EXPECT_NE(dfn.find("DEFN 6 ST=RECD,RT=;END DEFN\n"), std::string::npos);

  const std::string dat = Slurp(dir.File("OUT.DAT"));
  std::istringstream lines(dat);
  std::string line;
  std::size_t comm = 0, data = 0;
  while (std::getline(lines, line)) {
    if (line.rfind("COMM", 0) == 0) {
      ++comm;
      EXPECT_LE(line.size(), 80u);  // RT:A4 + COMMENTS:A76
    } else {
      ASSERT_EQ(line.rfind("DATA", 0), 0u) << line;
      EXPECT_EQ(line.size(), 4u + 4u * 25u);
      ++data;
    }
  }
  EXPECT_EQ(comm, 3u);
  EXPECT_EQ(data, 2u);
  EXPECT_NE(dat.find(kGdf2DefaultNull), std::string::npos);

  auto reader = OpenGdf2Reader(dir.File("OUT.DFN"), {});
  const Table back = ReadAll(*reader);
  EXPECT_EQ(back.channel(1).info.name, "bx");
  EXPECT_EQ(back.channel(1).info.unit, "nT");
  EXPECT_EQ(back.channel(1).info.long_name, "Fluxgate X");
  EXPECT_EQ(back.channel(3).info.long_name, "");
  EXPECT_TRUE(std::isnan(back.Column("bx")[1]));
}

TEST(Gdf2Writer, WritesInfinitiesThatFollowTheNonFinitePolicy) {
  std::ostringstream dfn, dat;
  Table table({{"time", "s", ""}, {"v", "", ""}});
  table.channel(0).values = {1.0, 2.0};
  table.channel(1).values = {std::numeric_limits<double>::infinity(),
                             -std::numeric_limits<double>::infinity()};
  auto writer = CreateGdf2Writer(dfn, dat, table.Schema(), {});
  writer->Write(table);
  writer->Close();
  {
    std::istringstream d(dfn.str()), a(dat.str());
    Gdf2Reader reader(d, "w.dfn", a, "w.dat", {});
    Table chunk;
    EXPECT_THROW(reader.ReadChunk(&chunk, 10), InputError);
  }
  std::istringstream d(dfn.str()), a(dat.str());
  ReadOptions gap;
  gap.non_finite = NonFinitePolicy::kGap;
  Gdf2Reader reader(d, "w.dfn", a, "w.dat", gap);
  const Table back = ReadAll(reader);
  ASSERT_EQ(back.rows(), 2u);
  EXPECT_TRUE(std::isnan(back.Column("v")[0]));
}

TEST(Gdf2Writer, RefusesAValueThatWouldReadBackAsTheNull) {
  std::ostringstream dfn, dat;
  Table table({{"time", "s", ""}, {"v", "", ""}});
  table.channel(0).values = {1.0};
  double null_value = 0.0;
  ASSERT_EQ(std::sscanf(kGdf2DefaultNull, "%lf", &null_value), 1);
  table.channel(1).values = {null_value};
  auto writer = CreateGdf2Writer(dfn, dat, table.Schema(), {});
  EXPECT_THROW(writer->Write(table), std::runtime_error);
}

TEST(Gdf2Writer, RejectsChannelNamesThatGdf2CannotCarry) {
  for (const std::string bad : {"", "mag raw", "a:b", "a;b", "a,b", "a=b"}) {
    std::ostringstream dfn, dat;
    EXPECT_THROW(
        CreateGdf2Writer(dfn, dat, {{"time", "s", ""}, {bad, "", ""}}, {}),
        InputError)
        << "'" << bad << "'";
  }
  std::ostringstream dfn, dat;
  EXPECT_THROW(
      CreateGdf2Writer(dfn, dat, {{"time", "s", ""}, {"TIME", "", ""}}, {}),
      InputError);
}

TEST(Gdf2Writer, WritesAChannelNamedRtWithoutTheRecordTypeField) {
  // Found by the fuzzer: a numeric field RT read from one file must not
  // clash with the RT:A4 record-type field when written.
  std::ostringstream dfn, dat;
  Table table({{"RT", "", ""}, {"time", "s", ""}});
  table.channel(0).values = {7.0, 8.0};
  table.channel(1).values = {1.0, 2.0};
  WriteOptions options;
  options.comment = "a comment line";
  auto writer = CreateGdf2Writer(dfn, dat, table.Schema(), options);
  writer->Write(table);
  writer->Close();
  EXPECT_EQ(dfn.str().find("RT=;RT:A4"), std::string::npos) << dfn.str();
  std::istringstream d(dfn.str()), a(dat.str());
  Gdf2Reader reader(d, "w.dfn", a, "w.dat", {});
  const Table back = ReadAll(reader);
  ASSERT_EQ(back.rows(), 2u);
  EXPECT_EQ(back.Column("RT")[1], 8.0);
  EXPECT_EQ(reader.skipped_lines(), 1u);
}

TEST(Gdf2Writer, KeepsSeparatorsOutOfUnitAndLongName) {
  std::ostringstream dfn, dat;
  Table table({{"time", "s", ""}, {"v", "n:T", "field, compensated; final"}});
  table.channel(0).values = {1.0};
  table.channel(1).values = {2.0};
  auto writer = CreateGdf2Writer(dfn, dat, table.Schema(), {});
  writer->Write(table);
  writer->Close();
  std::istringstream d(dfn.str()), a(dat.str());
  Gdf2Reader reader(d, "w.dfn", a, "w.dat", {});
  EXPECT_EQ(reader.channels()[1].unit, "n T");
  EXPECT_EQ(reader.channels()[1].long_name, "field  compensated  final");
}

}  // namespace
}  // namespace fluxtrim::io
