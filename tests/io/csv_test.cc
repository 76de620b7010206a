// CSV reader and writer: header rules, comments, units, --map, number
// parsing and formatting (checked against Python's float() and repr(), which
// are correctly rounded and shortest-round-trip respectively), chunking and
// real-time behaviour on a pipe.

#include "io/csv.h"

#include <unistd.h>

#include <charconv>
#include <cmath>
#include <cstdint>
#include <cstring>
#include <fstream>
#include <limits>
#include <random>
#include <sstream>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "io/error.h"
#include "io/recording.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::io {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

::testing::AssertionResult Contains(const std::string& text,
                                    const std::string& part) {
  if (text.find(part) != std::string::npos) {
    return ::testing::AssertionSuccess();
  }
  return ::testing::AssertionFailure()
         << "'" << text << "' does not contain '" << part << "'";
}

using Values = std::vector<double>;

std::uint64_t Bits(double v) {
  std::uint64_t b;
  std::memcpy(&b, &v, sizeof b);
  return b;
}

std::string TempPath(const std::string& name) {
  return ::testing::TempDir() + "csv_test_" + std::to_string(::getpid()) +
         "_" + name;
}

void WriteFile(const std::string& path, const std::string& text) {
  std::ofstream out(path, std::ios::binary);
  out << text;
}

Table ReadAll(const std::string& text, const ReadOptions& options = {},
              std::size_t chunk_rows = 1 << 16) {
  std::istringstream in(text);
  CsvReader reader(in, "test.csv", options);
  Table table(reader.channels());
  Table chunk;
  while (reader.ReadChunk(&chunk, chunk_rows) > 0) table.Append(chunk);
  return table;
}

std::string WriteAll(const Table& table, const WriteOptions& options = {}) {
  std::ostringstream out;
  CsvWriter writer(out, "out.csv", table.Schema(), options);
  writer.Write(table);
  writer.Close();
  return out.str();
}

// Runs a Python script (Debian's python3, FLUXTRIM_PYTHON) on a file and
// returns its standard output.
std::string RunPython(const std::string& script, const std::string& arg) {
  const std::string script_path = TempPath("script.py");
  WriteFile(script_path, script);
  const std::string command = std::string(FLUXTRIM_PYTHON) + " " +
                              script_path + " " + arg;
  const test_support::CommandResult run = test_support::RunCommand(command);
  EXPECT_EQ(run.code, 0) << "python failed: " << command;
  return run.output;
}

TEST(CsvReader, MatchesHeaderNamesCaseInsensitivelyAndKeepsTheirSpelling) {
  const Table t = ReadAll("TIME,Bx,bY\n0.5,1,2\n");
  ASSERT_EQ(t.cols(), 3u);
  EXPECT_EQ(t.channel(0).info.name, "TIME");
  EXPECT_EQ(t.channel(1).info.name, "Bx");
  EXPECT_TRUE(t.Has("time"));
  EXPECT_TRUE(t.Has("BY"));
  EXPECT_EQ(t.Column("by")[0], 2.0);
}

TEST(CsvReader, SkipsCommentsAndBlankLinesAnywhere) {
  const Table t = ReadAll(
      "# recorded by the test\n\n  # indented comment\ntime,f\n0,1\n# "
      "mid-file comment\n\n   \n1,2\n#last\n");
  EXPECT_EQ(t.Column("time"), (Values{0.0, 1.0}));
  EXPECT_EQ(t.Column("f"), (Values{1.0, 2.0}));
}

TEST(CsvReader, AcceptsCrlfLineEndsAndAByteOrderMark) {
  const Table t = ReadAll("\xEF\xBB\xBFtime,f\r\n0,1\r\n1,2\r\n");
  EXPECT_EQ(t.channel(0).info.name, "time");
  EXPECT_EQ(t.Column("f"), (Values{1.0, 2.0}));
}

TEST(CsvReader, AcceptsACompleteLastLineWithoutNewline) {
  const Table t = ReadAll("time,f\n0,1\n1,2");
  EXPECT_EQ(t.Column("f"), (Values{1.0, 2.0}));
}

TEST(CsvReader, ReadsQuotedHeaderNames) {
  const Table t = ReadAll("\"time\", \"mag \"\"A\"\"\" ,\"x,y\"\n0,1,2\n");
  ASSERT_EQ(t.cols(), 3u);
  EXPECT_EQ(t.channel(1).info.name, "mag \"A\"");
  EXPECT_EQ(t.channel(2).info.name, "x,y");
}

TEST(CsvReader, AcceptsBlanksAPlusSignAndQuotesAroundNumbers) {
  const Table t = ReadAll("time,a,b,c\n 0 ,+1.5,\t-2e3 ,\"7\"\n");
  EXPECT_EQ(t.Column("time")[0], 0.0);
  EXPECT_EQ(t.Column("a")[0], 1.5);
  EXPECT_EQ(t.Column("b")[0], -2000.0);
  EXPECT_EQ(t.Column("c")[0], 7.0);
}

TEST(CsvReader, ReadsAnEmptyFieldAsAMissingValue) {
  const Table t = ReadAll("time,a,b\n0,,1\n1,2,\n2, ,3\n");
  EXPECT_TRUE(std::isnan(t.Column("a")[0]));
  EXPECT_TRUE(std::isnan(t.Column("b")[1]));
  EXPECT_TRUE(std::isnan(t.Column("a")[2]));
  EXPECT_EQ(t.Column("a")[1], 2.0);
}

TEST(CsvReader, GivesDefaultUnitsByCanonicalName) {
  const Table t = ReadAll(
      "time,bx,by,bz,f,roll,pitch,heading,lat,lon,alt,i_motor\n"
      "0,1,2,3,4,5,6,7,8,9,10,11\n");
  std::vector<std::string> units;
  for (const Channel& c : t.channels()) units.push_back(c.info.unit);
  EXPECT_EQ(units, (std::vector<std::string>{"s", "nT", "nT", "nT", "nT", "deg", "deg",
                                 "deg", "deg", "deg", "m", ""}));
}

TEST(CsvReader, ReadsTheUnitsCommentAndFallsBackToDefaultsForEmptyEntries) {
  const Table t =
      ReadAll("# units: ms, ,A\ntime,bx,i_motor\n0,1,2\n");
  EXPECT_EQ(t.channel(0).info.unit, "ms");
  EXPECT_EQ(t.channel(1).info.unit, "nT");
  EXPECT_EQ(t.channel(2).info.unit, "A");
}

TEST(CsvWriter, WritesUnitsAndCommentsThatReadBack) {
  Table table({{"time", "s", ""}, {"i_motor", "A", ""}, {"note", "", ""}});
  table.Column("time") = {0.0, 0.1};
  table.Column("i_motor") = {12.5, 13.0};
  table.Column("note") = {1.0, 2.0};
  WriteOptions options;
  options.comment = "invented test flight\nsecond line";
  const std::string text = WriteAll(table, options);
  EXPECT_EQ(text.rfind("# invented test flight\n# second line\n", 0), 0u)
      << text;
  EXPECT_TRUE(Contains(text, "# units: s,A,\ntime,i_motor,note\n"));
  const Table back = ReadAll(text);
  EXPECT_EQ(back.channel(0).info.unit, "s");
  EXPECT_EQ(back.channel(1).info.unit, "A");
  EXPECT_EQ(back.channel(2).info.unit, "");
}

TEST(CsvWriter, QuotesNamesThatNeedItAndReadsThemBack) {
  Table table({{"time", "s", ""}, {"a,b", "", ""}, {"#c", "", ""}});
  table.Column("time") = {1.0};
  table.Column("a,b") = {2.0};
  table.Column("#c") = {3.0};
  const Table back = ReadAll(WriteAll(table));
  ASSERT_EQ(back.cols(), 3u);
  EXPECT_EQ(back.channel(1).info.name, "a,b");
  EXPECT_EQ(back.channel(2).info.name, "#c");
  EXPECT_EQ(back.Column("#c")[0], 3.0);
}

TEST(CsvWriter, WritesNanAsAnEmptyFieldAndInfinitiesAsText) {
  Table table({{"time", "", ""}, {"a", "", ""}, {"b", "", ""}});
  table.Column("time") = {1.0};
  table.Column("a") = {kNaN};
  table.Column("b") = {-std::numeric_limits<double>::infinity()};
  EXPECT_TRUE(Contains(WriteAll(table), "time,a,b\n1,,-inf\n"));
}

TEST(CsvReader, MapReadsAnotherColumnUnderTheCanonicalName) {
  ReadOptions options;
  options.rename["time"] = "GPS_SECONDS";
  options.rename["f"] = "mag_raw";
  const Table t = ReadAll("gps_seconds,MAG_RAW,x\n0,1,2\n", options);
  EXPECT_EQ(t.channel(0).info.name, "time");
  EXPECT_EQ(t.channel(0).info.unit, "s");
  EXPECT_EQ(t.channel(1).info.name, "f");
  EXPECT_EQ(t.Column("f")[0], 1.0);
}

TEST(CsvReader, MapSwapsColumnsAndMovesADisplacedColumnAside) {
  ReadOptions options;
  options.rename["bx"] = "by";
  options.rename["by"] = "bx";
  options.rename["f"] = "f2";
  const Table t = ReadAll("time,bx,by,f,f2\n0,1,2,3,4\n", options);
  EXPECT_EQ(t.Column("bx")[0], 2.0);
  EXPECT_EQ(t.Column("by")[0], 1.0);
  EXPECT_EQ(t.Column("f")[0], 4.0);
  EXPECT_EQ(t.Column("f_orig")[0], 3.0);
}

TEST(CsvReader, MapOfAColumnThatDoesNotExistNamesTheColumns) {
  ReadOptions options;
  options.rename["f"] = "mag";
  try {
    ReadAll("time,bx\n0,1\n", options);
    FAIL() << "expected InputError";
  } catch (const InputError& e) {
    EXPECT_TRUE(Contains(e.what(), "test.csv:1"));
    EXPECT_TRUE(Contains(e.what(), "no column 'mag'"));
    EXPECT_TRUE(Contains(e.what(), "time, bx"));
  }
}

TEST(CsvReader, ReturnsTheSameRowsWhateverTheChunkSize) {
  std::string text = "time,a,b\n";
  for (int i = 0; i < 1000; ++i) {
    text += std::to_string(i) + "," + std::to_string(i * 0.5) + "," +
            (i % 7 == 0 ? "" : std::to_string(-i)) + "\n";
    if (i % 100 == 0) text += "# comment\n";
  }
  const Table whole = ReadAll(text);
  ASSERT_EQ(whole.rows(), 1000u);
  for (std::size_t chunk : {1u, 3u, 64u, 999u, 1000u, 5000u}) {
    const Table t = ReadAll(text, {}, chunk);
    ASSERT_EQ(t.rows(), whole.rows()) << chunk;
    for (std::size_t c = 0; c < t.cols(); ++c) {
      for (std::size_t r = 0; r < t.rows(); ++r) {
        ASSERT_EQ(Bits(t.channel(c).values[r]),
                  Bits(whole.channel(c).values[r]))
            << "chunk " << chunk << " row " << r;
      }
    }
  }
}

TEST(CsvReader, ReadsAFileByPathLikeAStream) {
  const std::string path = TempPath("by_path.csv");
  WriteFile(path, "time,f\n0,1\n1,2\n");
  CsvReader reader(path);
  EXPECT_EQ(reader.path(), path);
  Table chunk;
  EXPECT_EQ(reader.ReadChunk(&chunk, 10), 2u);
  EXPECT_EQ(chunk.Column("f"), (Values{1.0, 2.0}));
  EXPECT_EQ(reader.ReadChunk(&chunk, 10), 0u);
  EXPECT_EQ(chunk.rows(), 0u);
}

TEST(CsvReader, ParsesNumbersExactlyAsPythonFloatDoes) {
  // Decimal strings of every kind: random digits and exponents, halfway
  // cases, subnormals, the extremes of the double range.
  std::vector<std::string> texts = {
      "0.1", "0.2", "0.30000000000000004", "2.2250738585072011e-308",
      "2.2250738585072014e-308", "4.9406564584124654e-324", "5e-324",
      "1.7976931348623157e308", "9007199254740993", "9007199254740992.5",
      "123456789012345678901234567890", "-0", "48213.27", "1e23",
      "8.589973e9", "0.000001", "1.00000000000000011102230246251565404"};
  std::mt19937_64 rng(20240607);
  for (int i = 0; i < 2000; ++i) {
    std::string s = (rng() % 2) ? "-" : "";
    const int digits = 1 + static_cast<int>(rng() % 20);
    for (int d = 0; d < digits; ++d) s += static_cast<char>('0' + rng() % 10);
    const int point = static_cast<int>(rng() % (digits + 1));
    if (point < digits) s.insert(s.size() - static_cast<std::size_t>(point), ".");
    if (rng() % 2) s += "e" + std::to_string(static_cast<int>(rng() % 580) - 300);
    texts.push_back(s);
  }
  std::string csv = "time,x\n";
  for (std::size_t i = 0; i < texts.size(); ++i) {
    csv += std::to_string(i) + "," + texts[i] + "\n";
  }
  const Table t = ReadAll(csv);
  ASSERT_EQ(t.rows(), texts.size());

  // Outside source: Python's float() is correctly rounded (round half to
  // even), as IEEE 754 requires of decimal-to-binary conversion.
  std::string list;
  for (const std::string& s : texts) list += s + "\n";
  const std::string list_path = TempPath("numbers.txt");
  WriteFile(list_path, list);
  const std::string out = RunPython(
      "import struct, sys\n"
      "for line in open(sys.argv[1]):\n"
      "    print(struct.unpack('<Q', struct.pack('<d', float(line)))[0])\n",
      list_path);
  std::istringstream bits(out);
  for (std::size_t i = 0; i < texts.size(); ++i) {
    std::uint64_t expected = 0;
    ASSERT_TRUE(bits >> expected) << "python output ended at " << i;
    EXPECT_EQ(Bits(t.Column("x")[i]), expected) << texts[i];
  }
}

TEST(CsvReader, ReadsPlainDecimalsExactlyAsStdFromChars) {
  // The reader's fast path for [-]digits[.digits] must agree bit for bit
  // with std::from_chars (the C++17 library's correctly rounded parser) on
  // the numbers loggers write: up to 20 digits, any position of the point,
  // around 2^53 where the fast path hands over.
  std::mt19937_64 rng(53);
  std::vector<std::string> texts = {"9007199254740992", "9007199254740993",
                                    "900719925474099.3", "0.9007199254740993",
                                    "-0.0", "0.", "-12.", ".5",
                                    "1234567890123456789",
                                    "0.0000000000000000000001234"};
  for (int i = 0; i < 100000; ++i) {
    const int digits = 1 + static_cast<int>(rng() % 20);
    std::string s = (rng() % 2) ? "-" : "";
    for (int d = 0; d < digits; ++d) s += static_cast<char>('0' + rng() % 10);
    const std::size_t point = rng() % (static_cast<std::size_t>(digits) + 1);
    s.insert(s.size() - point, ".");
    texts.push_back(s);
  }
  std::string csv = "time,x\n";
  for (std::size_t i = 0; i < texts.size(); ++i) {
    csv += std::to_string(i) + "," + texts[i] + "\n";
  }
  const Table t = ReadAll(csv);
  ASSERT_EQ(t.rows(), texts.size());
  for (std::size_t i = 0; i < texts.size(); ++i) {
    double expected = 0;
    const std::string& s = texts[i];
    const auto r = std::from_chars(s.data(), s.data() + s.size(), expected);
    ASSERT_EQ(r.ec, std::errc()) << s;
    ASSERT_EQ(Bits(t.Column("x")[i]), Bits(expected)) << s;
  }
}

TEST(CsvWriter, WritesTextThatReadsBackExactlyAndIsNoLongerThanPythonRepr) {
  std::vector<double> values = {0.1 + 0.2,       1.0 / 3.0, -0.0,
                                5e-324,          1e300,     123456.789,
                                48213.27,        1e22,      1e-7,
                                2.2250738585072014e-308,
                                -1.7976931348623157e308, 0.0001};
  std::mt19937_64 rng(7);
  for (int i = 0; i < 2000; ++i) {
    std::uint64_t b = rng();
    double v;
    std::memcpy(&v, &b, sizeof v);
    if (std::isfinite(v)) values.push_back(v);
  }
  Table table({{"time", "", ""}, {"x", "", ""}});
  for (std::size_t i = 0; i < values.size(); ++i) {
    table.Column("time").push_back(static_cast<double>(i));
    table.Column("x").push_back(values[i]);
  }
  const std::string path = TempPath("shortest.csv");
  {
    CsvWriter writer(path, table.Schema());
    writer.Write(table);
    writer.Close();
  }
  // Outside source: Python's repr(float) gives the shortest digit string
  // that round-trips (Python 3.1+, David Gay's algorithm). For each written
  // value Python checks that float(text) has the same bits, and that text is
  // no longer than repr (without repr's cosmetic ".0" on whole numbers).
  const std::string out = RunPython(
      "import struct, sys\n"
      "lines = open(sys.argv[1]).read().split('\\n')[1:]\n"
      "for line in lines:\n"
      "    if not line: continue\n"
      "    text = line.split(',')[1]\n"
      "    v = float(text)\n"
      "    r = repr(v)\n"
      "    if r.endswith('.0'): r = r[:-2]\n"
      "    print(struct.unpack('<Q', struct.pack('<d', v))[0], len(text),"
      " len(r))\n",
      path);
  std::istringstream lines(out);
  for (std::size_t i = 0; i < values.size(); ++i) {
    std::uint64_t bits = 0;
    std::size_t ours = 0, shortest = 0;
    ASSERT_TRUE(lines >> bits >> ours >> shortest) << "row " << i;
    EXPECT_EQ(bits, Bits(values[i])) << "row " << i;
    EXPECT_LE(ours, shortest) << "row " << i << " value " << values[i];
  }
}

TEST(CsvReader, ReturnsWaitingLinesOfAPipeWithoutWaitingForMore) {
  int fds[2];
  ASSERT_EQ(::pipe(fds), 0);
  const std::string first = "time,f\n0,1\n1,2\n";
  ASSERT_EQ(::write(fds[1], first.data(), first.size()),
            static_cast<ssize_t>(first.size()));
  CsvReader reader(std::make_unique<FdSource>(fds[0], true), "pipe");
  Table chunk;
  // The writer end stays open: a reader that waited for a full chunk would
  // block here for ever.
  EXPECT_EQ(reader.ReadChunk(&chunk, 1000), 2u);
  const std::string second = "2,3";  // no newline yet: not a whole line
  ASSERT_EQ(::write(fds[1], second.data(), second.size()), 3);
  const std::string rest = "\n3,4\n";
  ASSERT_EQ(::write(fds[1], rest.data(), rest.size()), 5);
  EXPECT_EQ(reader.ReadChunk(&chunk, 1000), 2u);
  EXPECT_EQ(chunk.Column("f"), (Values{3.0, 4.0}));
  ::close(fds[1]);
  EXPECT_EQ(reader.ReadChunk(&chunk, 1000), 0u);
}

TEST(CsvWriter, RejectsRepeatedChannelNames) {
  std::ostringstream out;
  EXPECT_THROW(CsvWriter(out, "x.csv", {{"time", "", ""}, {"TIME", "", ""}}),
               std::invalid_argument);
}

TEST(CsvWriter, RejectsAChunkOfAnotherSchema) {
  std::ostringstream out;
  CsvWriter writer(out, "x.csv", {{"time", "", ""}, {"f", "", ""}});
  Table other({{"time", "", ""}, {"g", "", ""}});
  EXPECT_THROW(writer.Write(other), std::invalid_argument);
}

}  // namespace
}  // namespace fluxtrim::io
