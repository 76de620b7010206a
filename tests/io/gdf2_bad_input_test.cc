// Bad ASEG-GDF2 input: every case throws InputError naming the file (.dfn or
// .dat), the line, the column of the field's first character, the field and
// what was expected; rows before a bad line are delivered first.

#include <gtest/gtest.h>

#include <cmath>
#include <filesystem>
#include <fstream>
#include <random>
#include <sstream>
#include <string>

#include "io/error.h"
#include "io/gdf2.h"

namespace fluxtrim::io {
namespace {

namespace fs = std::filesystem;

// 1-based columns of the fields of kDfn in a .dat line.
constexpr std::size_t kTimeColumn = 5;   // after RT:A4
constexpr std::size_t kMagColumn = 15;   // TIME is F10.1
constexpr std::size_t kBzColumn = 27;    // MAG is F12.3
const std::string kDfn =
    "DEFN   ST=RECD,RT=COMM;RT:A4;COMMENTS:A76\n"
    "DEFN 1 ST=RECD,RT=;RT:A4\n"
    "DEFN 2 ST=RECD,RT=;TIME:F10.1:UNIT=s,NULL=-99999.9\n"
    "DEFN 3 ST=RECD,RT=;MAG:F12.3:UNIT=nT,NULL=-99999.999\n"
    "DEFN 4 ST=RECD,RT=;BZ:F10.2:UNIT=nT\n"
    "DEFN 5 ST=RECD,RT=;END DEFN\n";
// Each line 4 + 10 + 12 + 10 = 36 characters.
const std::string kGood1 = "DATA   37800.0   57123.456 -53011.87\n";
const std::string kGood2 = "DATA   37800.1   57123.512 -53012.11\n";
const std::string kGood3 = "DATA   37800.2   57123.601 -53012.36\n";

// Reads everything; returns the error (or fails the test if none).
InputError ReadExpectingError(const std::string& dfn, const std::string& dat,
                              const ReadOptions& options = {},
                              std::size_t* rows_before = nullptr) {
  std::istringstream d(dfn), a(dat);
  std::size_t rows = 0;
  try {
    Gdf2Reader reader(d, "s.dfn", a, "s.dat", options);
    Table chunk;
    std::size_t n;
    while ((n = reader.ReadChunk(&chunk, 1000)) > 0) rows += n;
  } catch (const InputError& e) {
    if (rows_before != nullptr) *rows_before = rows;
    return e;
  }
  ADD_FAILURE() << "no InputError for\n" << dfn << "---\n" << dat;
  return InputError("none");
}

bool Has(const InputError& e, const std::string& text) {
  return std::string(e.what()).find(text) != std::string::npos;
}

TEST(Gdf2BadInput, UnknownFormatLetterNamesDfnLineColumnAndField) {
  const std::string dfn =
      "DEFN 1 ST=RECD,RT=;TIME:F10.1\n"
      "DEFN 2 ST=RECD,RT=;MAG:Q10.3:UNIT=nT\n";
  const InputError e = ReadExpectingError(dfn, "");
  EXPECT_EQ(e.file(), "s.dfn");
  EXPECT_EQ(e.line(), 2u);
  EXPECT_EQ(e.column(), 24u);  // the 'Q'
  EXPECT_TRUE(Has(e, "MAG")) << e.what();
  EXPECT_TRUE(Has(e, "Q10.3")) << e.what();
  EXPECT_TRUE(Has(e, "F10.3")) << e.what();  // an example of what is expected
}

TEST(Gdf2BadInput, MalformedFormatsAreRejected) {
  for (const std::string format :
       {"F", "F.3", "F10.", "10", "FF10.3", "F10.3x", "0F10.3", "F0.0",
        "E25.16E", "A", "F99999999.3"}) {
    const std::string dfn = "DEFN 1 ST=RECD,RT=;TIME:F10.1;MAG:" + format +
                            "\n";
    const InputError e = ReadExpectingError(dfn, "");
    EXPECT_EQ(e.file(), "s.dfn") << format;
    EXPECT_EQ(e.line(), 1u) << format;
    EXPECT_EQ(e.column(), 35u) << format;
    EXPECT_TRUE(Has(e, "MAG")) << e.what();
  }
}

TEST(Gdf2BadInput, DefinitionLineNotStartingWithDefnIsRejected) {
  const InputError e =
      ReadExpectingError("DEFN 1 ST=RECD,RT=;TIME:F10.1\nTIME:F10.1\n", "");
  EXPECT_EQ(e.line(), 2u);
  EXPECT_EQ(e.column(), 1u);
  EXPECT_TRUE(Has(e, "DEFN")) << e.what();
}

TEST(Gdf2BadInput, FieldWithoutFormatIsRejected) {
  const InputError e = ReadExpectingError("DEFN 1 ST=RECD,RT=;TIME\n", "");
  EXPECT_EQ(e.line(), 1u);
  EXPECT_EQ(e.column(), 20u);
  EXPECT_TRUE(Has(e, "NAME:FORMAT")) << e.what();
}

TEST(Gdf2BadInput, FieldDefinedTwiceIsRejected) {
  const InputError e = ReadExpectingError(
      "DEFN 1 ST=RECD,RT=;TIME:F10.1\nDEFN 2 ST=RECD,RT=;time:F10.1\n", "");
  EXPECT_EQ(e.line(), 2u);
  EXPECT_TRUE(Has(e, "twice")) << e.what();
}

TEST(Gdf2BadInput, ArrayElementNamesCollidingWithAFieldAreRejected) {
  const InputError e = ReadExpectingError(
      "DEFN 1 ST=RECD,RT=;TIME:F10.1;S_1:F5.1;S:2F5.1\n", "");
  EXPECT_TRUE(Has(e, "S_1")) << e.what();
}

TEST(Gdf2BadInput, TooManyChannelsAreRejected) {
  const InputError e = ReadExpectingError(
      "DEFN 1 ST=RECD,RT=;TIME:F10.1;S:1024F5.1\n"
      "DEFN 2 ST=RECD,RT=;T:1024F5.1\n",
      "");
  EXPECT_EQ(e.line(), 2u);
  EXPECT_TRUE(Has(e, "field T")) << e.what();
  EXPECT_TRUE(Has(e, "2048")) << e.what();
}

TEST(Gdf2BadInput, NoDataDefinitionIsRejected) {
  const InputError e = ReadExpectingError(
      "DEFN   ST=RECD,RT=COMM;RT:A4;COMMENTS:A76\n"
      "DEFN 1 ST=RECD,RT=;END DEFN\n",
      kGood1);
  EXPECT_EQ(e.file(), "s.dfn");
  EXPECT_TRUE(Has(e, "no data record definition")) << e.what();
  const InputError empty = ReadExpectingError("", kGood1);
  EXPECT_TRUE(Has(empty, "no data record definition")) << empty.what();
}

TEST(Gdf2BadInput, WrongStructureTypeIsRejected) {
  const InputError e = ReadExpectingError("DEFN 1 ST=LINE,RT=;TIME:F10.1\n", "");
  EXPECT_TRUE(Has(e, "ST=RECD")) << e.what();
}

TEST(Gdf2BadInput, MissingTimeChannelNamesTheFieldsThatExist) {
  const InputError e = ReadExpectingError(
      "DEFN 1 ST=RECD,RT=;FIDTIME:F10.1;MAG:F10.3\n", "");
  EXPECT_EQ(e.file(), "s.dfn");
  EXPECT_TRUE(Has(e, "'time'")) << e.what();
  EXPECT_TRUE(Has(e, "FIDTIME, MAG")) << e.what();
  EXPECT_TRUE(Has(e, "--map")) << e.what();
}

TEST(Gdf2BadInput, MissingRequiredChannelIsRejected) {
  ReadOptions options;
  options.required = {"bx"};
  const InputError e = ReadExpectingError(kDfn, kGood1, options);
  EXPECT_TRUE(Has(e, "'bx'")) << e.what();
}

TEST(Gdf2BadInput, MappingToAnAbsentOrTextFieldIsRejected) {
  ReadOptions options;
  options.rename["bx"] = "FLUXX";
  const InputError e = ReadExpectingError(kDfn, kGood1, options);
  EXPECT_TRUE(Has(e, "FLUXX")) << e.what();
  EXPECT_TRUE(Has(e, "TIME, MAG, BZ")) << e.what();

  ReadOptions text;
  text.rename["time"] = "DATE";
  const InputError t = ReadExpectingError(
      "DEFN 1 ST=RECD,RT=;DATE:A10;TIME:F10.1\n", "", text);
  EXPECT_TRUE(Has(t, "text")) << t.what();
}

TEST(Gdf2BadInput, MappingOneFieldToTwoChannelsIsRejected) {
  ReadOptions options;
  options.rename["f"] = "MAG";
  options.rename["total"] = "mag";
  const InputError e = ReadExpectingError(kDfn, kGood1, options);
  EXPECT_TRUE(Has(e, "two channels")) << e.what();
}

TEST(Gdf2BadInput, ShortLineNamesTheFieldThatIsCut) {
  const std::string cut = "DATA   37800.3   57123.6\n";  // 24 characters
  std::size_t rows = 0;
  const InputError e =
      ReadExpectingError(kDfn, kGood1 + kGood2 + cut, {}, &rows);
  EXPECT_EQ(rows, 2u);
  EXPECT_EQ(e.file(), "s.dat");
  EXPECT_EQ(e.line(), 3u);
  EXPECT_EQ(e.column(), kMagColumn);
  EXPECT_TRUE(Has(e, "field MAG")) << e.what();
  EXPECT_TRUE(Has(e, "cut")) << e.what();
  EXPECT_TRUE(Has(e, "36-character")) << e.what();
}

TEST(Gdf2BadInput, LineCutInsideAnArrayNamesTheElement) {
  const std::string dfn = "DEFN 1 ST=RECD,RT=;TIME:F6.1;S:4F5.1\n";
  const InputError e = ReadExpectingError(dfn, "   1.0  1.0  2.0  3\n");
  EXPECT_EQ(e.column(), 17u);
  EXPECT_TRUE(Has(e, "field S_2")) << e.what();
}

TEST(Gdf2BadInput, TextAfterTheLastFieldIsRejected) {
  const InputError e =
      ReadExpectingError(kDfn, "DATA   37800.0   57123.456 -53011.87 12\n");
  EXPECT_EQ(e.line(), 1u);
  EXPECT_EQ(e.column(), 38u);
  EXPECT_TRUE(Has(e, "after the last field")) << e.what();
}

TEST(Gdf2BadInput, NonNumericTextNamesFieldAndColumn) {
  std::size_t rows = 0;
  const InputError e = ReadExpectingError(
      kDfn, kGood1 + "DATA   37800.1   57123.512 -53O12.11\n", {}, &rows);
  EXPECT_EQ(rows, 1u);
  EXPECT_EQ(e.file(), "s.dat");
  EXPECT_EQ(e.line(), 2u);
  EXPECT_EQ(e.column(), kBzColumn);
  EXPECT_TRUE(Has(e, "field BZ")) << e.what();
  EXPECT_TRUE(Has(e, "expected a number")) << e.what();
  EXPECT_TRUE(Has(e, "-53O12.11")) << e.what();
}

TEST(Gdf2BadInput, NumberBeyondDoubleRangeIsRejected) {
  const InputError e =
      ReadExpectingError(kDfn, "DATA   37800.0     1.0E999 -53011.87\n");
  EXPECT_EQ(e.column(), kMagColumn);
  EXPECT_TRUE(Has(e, "range")) << e.what();
}

TEST(Gdf2BadInput, UnknownRecordTypeIsRejected) {
  const InputError e =
      ReadExpectingError(kDfn, "DATE   37800.0   57123.456 -53011.87\n");
  EXPECT_EQ(e.column(), 1u);
  EXPECT_TRUE(Has(e, "DATE")) << e.what();
}

TEST(Gdf2BadInput, NanTextIsRejectedByDefault) {
  for (const std::string text : {"        NaN", "        inf", "  -Infinity",
                                 "     1.#INF", "***********"}) {
    const InputError e = ReadExpectingError(
        kDfn, "DATA   37800.0 " + text + " -53011.87\n");
    EXPECT_EQ(e.line(), 1u) << text;
    EXPECT_EQ(e.column(), kMagColumn) << text;
    EXPECT_TRUE(Has(e, "field MAG")) << e.what();
    EXPECT_TRUE(Has(e, "gap")) << e.what();  // names the way out
  }
}

TEST(Gdf2BadInput, TimeGoingBackwardsIsRejected) {
  std::size_t rows = 0;
  const InputError e =
      ReadExpectingError(kDfn, kGood2 + kGood3 + kGood1, {}, &rows);
  EXPECT_EQ(rows, 2u);
  EXPECT_EQ(e.line(), 3u);
  EXPECT_EQ(e.column(), kTimeColumn);
  EXPECT_TRUE(Has(e, "goes back")) << e.what();
  EXPECT_TRUE(Has(e, "line 2")) << e.what();
}

TEST(Gdf2BadInput, RepeatedTimeIsRejected) {
  const InputError e = ReadExpectingError(kDfn, kGood1 + kGood1);
  EXPECT_EQ(e.line(), 2u);
  EXPECT_TRUE(Has(e, "repeats")) << e.what();
}

TEST(Gdf2BadInput, MissingTimeIsRejected) {
  const InputError e = ReadExpectingError(
      kDfn, kGood1 + "DATA  -99999.9   57123.512 -53012.11\n");
  EXPECT_EQ(e.line(), 2u);
  EXPECT_EQ(e.column(), kTimeColumn);
  EXPECT_TRUE(Has(e, "time is missing")) << e.what();
}

TEST(Gdf2BadInput, EmptyDatIsRejected) {
  const InputError e = ReadExpectingError(kDfn, "");
  EXPECT_EQ(e.file(), "s.dat");
  EXPECT_TRUE(Has(e, "empty")) << e.what();
  const InputError c = ReadExpectingError(kDfn, "COMM only a comment\n\n");
  EXPECT_TRUE(Has(c, "no data records")) << c.what();
}

TEST(Gdf2BadInput, OverlongLineIsRejectedWithoutReadingItAll) {
  const std::string line = "DATA   37800.0" + std::string(1 << 20, ' ') + "x\n";
  const InputError e = ReadExpectingError(kDfn, line);
  EXPECT_EQ(e.line(), 1u);
  EXPECT_TRUE(Has(e, "longer")) << e.what();
}

TEST(Gdf2BadInput, RowsBeforeABadLineComeBeforeTheThrow) {
  std::istringstream d(kDfn), a(kGood1 + kGood2 + kGood3 +
                                "DATA   37800.3   57123.6xx -53012.60\n");
  Gdf2Reader reader(d, "s.dfn", a, "s.dat", {});
  Table chunk;
  EXPECT_EQ(reader.ReadChunk(&chunk, 2), 2u);
  EXPECT_EQ(chunk.Column("TIME")[1], 37800.1);  // as written in kGood2
  EXPECT_EQ(reader.ReadChunk(&chunk, 2), 1u);    // stops before the bad line
  EXPECT_EQ(chunk.Column("TIME")[0], 37800.2);
  try {
    reader.ReadChunk(&chunk, 2);
    ADD_FAILURE() << "no error";
  } catch (const InputError& e) {
    EXPECT_EQ(e.line(), 4u);
    EXPECT_EQ(e.column(), kMagColumn);
  }
  // The reader stays failed rather than skipping the bad line.
  EXPECT_THROW(reader.ReadChunk(&chunk, 2), InputError);
}

class TempDir {
 public:
  TempDir() {
    std::random_device rd;
    path_ = fs::temp_directory_path() /
            ("fluxtrim_gdf2_bad_" + std::to_string(rd()) +
             std::to_string(rd()));
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

TEST(Gdf2BadInput, MissingDatNamesThePathsTried) {
  TempDir dir;
  std::ofstream(dir.File("line.dfn")) << kDfn;
  try {
    OpenGdf2Reader(dir.File("line.dfn"), {});
    ADD_FAILURE() << "no error";
  } catch (const InputError& e) {
    EXPECT_EQ(e.file(), dir.File("line.dat"));
    EXPECT_TRUE(Has(e, dir.File("line.DAT"))) << e.what();
    EXPECT_TRUE(Has(e, ".dat")) << e.what();
  }
}

TEST(Gdf2BadInput, MissingDfnIsRejected) {
  TempDir dir;
  std::ofstream(dir.File("LINE.DAT")) << kGood1;
  try {
    OpenGdf2Reader(dir.File("LINE.DAT"), {});
    ADD_FAILURE() << "no error";
  } catch (const InputError& e) {
    EXPECT_EQ(e.file(), dir.File("LINE.DFN"));
    EXPECT_TRUE(Has(e, ".dfn")) << e.what();
  }
  // The named file itself missing.
  try {
    OpenGdf2Reader(dir.File("none.dfn"), {});
    ADD_FAILURE() << "no error";
  } catch (const InputError& e) {
    EXPECT_EQ(e.file(), dir.File("none.dfn"));
  }
}

TEST(Gdf2BadInput, PathWithoutGdf2ExtensionIsRejected) {
  EXPECT_THROW(OpenGdf2Reader("survey.csv", {}), InputError);
}

}  // namespace
}  // namespace fluxtrim::io
