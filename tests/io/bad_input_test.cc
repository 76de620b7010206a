// Bad recordings, one test each: every one must be an InputError naming the
// file and the place (line and column for CSV, frame index and byte offset
// for protobuf frames) and saying what was expected; a chunked reader must
// first hand over the good rows before the bad one. The last test checks the
// command line maps the error to exit code 1.

#include <unistd.h>

#include <cmath>
#include <fstream>
#include <limits>
#include <memory>
#include <sstream>
#include <string>
#include <vector>

#include <gtest/gtest.h>

#include "io/csv.h"
#include "io/error.h"
#include "io/frames.h"
#include "io/recording.h"
#include "proto/recording.pb.h"
#include "tests/support/subprocess.h"

namespace fluxtrim::io {
namespace {

::testing::AssertionResult Contains(const std::string& text,
                                    const std::string& part) {
  if (text.find(part) != std::string::npos) {
    return ::testing::AssertionSuccess();
  }
  return ::testing::AssertionFailure()
         << "'" << text << "' does not contain '" << part << "'";
}

// Reads the CSV text to the end in chunks of chunk_rows; returns the error.
// rows_before gets the number of rows delivered before the throw.
InputError CsvError(const std::string& text, const ReadOptions& options = {},
                    std::size_t chunk_rows = 1000,
                    std::size_t* rows_before = nullptr) {
  std::istringstream in(text);
  std::size_t rows = 0;
  try {
    CsvReader reader(in, "bad.csv", options);
    Table chunk;
    std::size_t n;
    while ((n = reader.ReadChunk(&chunk, chunk_rows)) > 0) rows += n;
  } catch (const InputError& e) {
    if (rows_before != nullptr) *rows_before = rows;
    return e;
  }
  ADD_FAILURE() << "no InputError for:\n" << text;
  return InputError("none");
}

// --- CSV ------------------------------------------------------------------

TEST(CsvBadInput, EmptyFileSaysAHeaderIsExpected) {
  const InputError e = CsvError("");
  EXPECT_EQ(e.file(), "bad.csv");
  EXPECT_TRUE(Contains(e.what(), "empty"));
  EXPECT_TRUE(Contains(e.what(), "expected a header row"));
}

TEST(CsvBadInput, CommentsOnlySaysThereIsNoHeader) {
  const InputError e = CsvError("# nothing here\n\n");
  EXPECT_TRUE(Contains(e.what(), "no header row"));
}

TEST(CsvBadInput, HeaderWithoutSamplesIsAnError) {
  const InputError e = CsvError("# units: s,nT\ntime,f\n# no data\n");
  EXPECT_EQ(e.line(), 2u);
  EXPECT_TRUE(Contains(e.what(), "not followed by any samples"));
}

TEST(CsvBadInput, MissingTimeChannelListsTheChannelsPresent) {
  const InputError e = CsvError("t,bx,by\n0,1,2\n");
  EXPECT_EQ(e.line(), 1u);
  EXPECT_TRUE(Contains(e.what(), "bad.csv:1"));
  EXPECT_TRUE(Contains(e.what(), "missing channel 'time'"));
  EXPECT_TRUE(Contains(e.what(), "t, bx, by"));
}

TEST(CsvBadInput, MissingRequiredFluxgateChannelIsNamed) {
  ReadOptions options;
  options.required = {"bx", "by", "bz"};
  const InputError e = CsvError("time,bx,by,f\n0,1,2,3\n", options);
  EXPECT_TRUE(Contains(e.what(), "missing channel 'bz'"));
  EXPECT_TRUE(Contains(e.what(), "--map bz=COLUMN"));
}

TEST(CsvBadInput, NonNumericFieldNamesLineColumnAndChannel) {
  std::size_t rows = 0;
  const InputError e =
      CsvError("time,bx,by\n0,1,2\n0.1,1,2\n0.2,abc,2\n0.3,1,2\n", {}, 1000,
               &rows);
  EXPECT_EQ(e.line(), 4u);
  EXPECT_EQ(e.column(), 5u);
  EXPECT_TRUE(Contains(e.what(), "bad.csv:4:5"));
  EXPECT_TRUE(Contains(e.what(), "'bx'"));
  EXPECT_TRUE(Contains(e.what(), "expected a number, found 'abc'"));
  // Loses nothing already accepted: the two good rows came first.
  EXPECT_EQ(rows, 2u);
}

TEST(CsvBadInput, NumberWithTrailingGarbageIsRejected) {
  const InputError e = CsvError("time,bx\n0,12.5nT\n");
  EXPECT_EQ(e.column(), 3u);
  EXPECT_TRUE(Contains(e.what(), "found '12.5nT'"));
}

TEST(CsvBadInput, NumberBeyondTheRangeOfADoubleIsRejected) {
  const InputError e = CsvError("time,bx\n0,1e400\n");
  EXPECT_TRUE(Contains(e.what(), "outside the range of a double"));
}

TEST(CsvBadInput, TooFewFieldsNamesTheExpectedColumns) {
  const InputError e = CsvError("time,bx,by\n0,1,2\n1,2\n");
  EXPECT_EQ(e.line(), 3u);
  EXPECT_TRUE(Contains(e.what(), "expected 3 fields (time, bx, by), found 2"));
}

TEST(CsvBadInput, TooManyFieldsPointsAtTheFirstExtraField) {
  const InputError e = CsvError("time,bx\n0,1\n1,2,3\n");
  EXPECT_EQ(e.line(), 3u);
  EXPECT_EQ(e.column(), 5u);
  EXPECT_TRUE(Contains(e.what(), "expected 2 fields (time, bx), found 3"));
}

TEST(CsvBadInput, TruncatedLastLineIsNamedAsTruncated) {
  std::size_t rows = 0;
  const InputError e =
      CsvError("time,bx,by,bz\n0,1,2,3\n0.1,1,2,3\n0.2,1,2", {}, 1000, &rows);
  EXPECT_EQ(e.line(), 4u);
  EXPECT_TRUE(Contains(e.what(), "truncated"));
  EXPECT_TRUE(Contains(e.what(), "no newline at the end of the file"));
  EXPECT_EQ(rows, 2u);
}

TEST(CsvBadInput, NanOrInfTextIsRejectedByDefault) {
  for (const char* text : {"nan", "NaN", "inf", "-Infinity"}) {
    const InputError e =
        CsvError(std::string("time,f\n0,1\n1,") + text + "\n");
    EXPECT_EQ(e.line(), 3u) << text;
    EXPECT_EQ(e.column(), 3u) << text;
    EXPECT_TRUE(Contains(e.what(), "finite number is expected")) << text;
    EXPECT_TRUE(Contains(e.what(), "--nonfinite gap")) << text;
  }
}

TEST(CsvBadInput, NanOrInfTextBecomesAGapUnderTheGapPolicy) {
  ReadOptions options;
  options.non_finite = NonFinitePolicy::kGap;
  std::istringstream in("time,f,g\n0,nan,1\n1,-inf,inf\n2,3,4\n");
  CsvReader reader(in, "gap.csv", options);
  Table t;
  ASSERT_EQ(reader.ReadChunk(&t, 10), 3u);
  EXPECT_TRUE(std::isnan(t.Column("f")[0]));
  EXPECT_TRUE(std::isnan(t.Column("f")[1]));
  EXPECT_TRUE(std::isnan(t.Column("g")[1]));
  EXPECT_EQ(t.Column("f")[2], 3.0);
}

TEST(CsvBadInput, MissingTimeInARowIsRejectedUnderEitherPolicy) {
  ReadOptions options;
  options.non_finite = NonFinitePolicy::kGap;
  for (const char* row : {",1", "nan,1"}) {
    const InputError e = CsvError(std::string("time,f\n0,1\n") + row + "\n",
                                  options);
    EXPECT_EQ(e.line(), 3u) << row;
    EXPECT_TRUE(Contains(e.what(), "time is missing")) << row;
  }
}

TEST(CsvBadInput, TimeGoingBackwardsNamesBothLines) {
  std::size_t rows = 0;
  const InputError e =
      CsvError("time,f\n0,1\n0.2,1\n0.1,1\n", {}, 1000, &rows);
  EXPECT_EQ(e.line(), 4u);
  EXPECT_EQ(e.column(), 1u);
  EXPECT_TRUE(Contains(e.what(), "goes backwards (line 3 has 0.2)"));
  EXPECT_EQ(rows, 2u);
}

TEST(CsvBadInput, DuplicateTimeIsRejectedByDefaultNamingTheLine) {
  const InputError e = CsvError("time,f\n0,1\n# gap\n0,2\n");
  EXPECT_EQ(e.line(), 4u);
  EXPECT_TRUE(Contains(e.what(), "repeats the time of line 2"));
}

TEST(CsvBadInput, DuplicateAndBackwardTimesAreKeptWhenAccepted) {
  ReadOptions options;
  options.time_order = TimeOrderPolicy::kAccept;
  std::istringstream in("time,f\n0,1\n0,2\n-1,3\n");
  CsvReader reader(in, "accept.csv", options);
  Table t;
  ASSERT_EQ(reader.ReadChunk(&t, 10), 3u);
  EXPECT_EQ(t.Column("time"), (std::vector<double>{0.0, 0.0, -1.0}));
}

TEST(CsvBadInput, RowsOfEarlierChunksAreDeliveredBeforeTheError) {
  std::string text = "time,f\n";
  for (int i = 0; i < 50; ++i) text += std::to_string(i) + ",1\n";
  text += "50,x\n51,1\n";
  std::istringstream in(text);
  CsvReader reader(in, "chunks.csv");
  Table chunk;
  std::vector<double> times;
  bool threw = false;
  try {
    while (reader.ReadChunk(&chunk, 8) > 0) {
      for (double t : chunk.Column("time")) times.push_back(t);
    }
  } catch (const InputError& e) {
    threw = true;
    EXPECT_EQ(e.line(), 52u);
  }
  EXPECT_TRUE(threw);
  ASSERT_EQ(times.size(), 50u);
  EXPECT_EQ(times.back(), 49.0);
  // The error stays: a further call throws again rather than skipping on.
  EXPECT_THROW(reader.ReadChunk(&chunk, 8), InputError);
}

TEST(CsvBadInput, RepeatedHeaderNameIsRejected) {
  const InputError e = CsvError("time,bx,BX\n0,1,2\n");
  EXPECT_EQ(e.column(), 9u);
  EXPECT_TRUE(Contains(e.what(), "appears twice"));
}

TEST(CsvBadInput, SemicolonSeparatedFileGetsAHint) {
  const InputError e = CsvError("time;bx;by\n0;1;2\n");
  EXPECT_TRUE(Contains(e.what(), "expected comma-separated columns"));
}

TEST(CsvBadInput, UnterminatedQuoteInTheHeaderIsRejected) {
  const InputError e = CsvError("time,\"bx\n0,1\n");
  EXPECT_EQ(e.column(), 6u);
  EXPECT_TRUE(Contains(e.what(), "unterminated quote"));
}

TEST(CsvBadInput, ControlCharacterInAHeaderNameIsRejected) {
  const InputError e = CsvError(std::string("time,b\0x\n0,1\n", 13));
  EXPECT_EQ(e.column(), 6u);
  EXPECT_TRUE(Contains(e.what(), "control character 0x00"));
}

TEST(CsvBadInput, UnitsCommentWithTheWrongCountIsRejected) {
  const InputError e = CsvError("# units: s\ntime,f\n0,1\n");
  EXPECT_EQ(e.line(), 1u);
  EXPECT_TRUE(Contains(e.what(), "1 units but the header has 2 columns"));
}

TEST(CsvBadInput, OverlongLineIsRejectedWithoutHoldingTheWholeFile) {
  std::string text = "time,f\n0,";
  text.append(CsvReader::kMaxLineBytes + 10, '1');
  text += "\n";
  const InputError e = CsvError(text);
  EXPECT_EQ(e.line(), 2u);
  EXPECT_TRUE(Contains(e.what(), "line longer than"));
}

TEST(CsvBadInput, MissingFileNamesThePath) {
  try {
    ReadRecording("/nonexistent/dir/flight.csv");
    FAIL() << "expected InputError";
  } catch (const InputError& e) {
    EXPECT_EQ(e.file(), "/nonexistent/dir/flight.csv");
    EXPECT_TRUE(Contains(e.what(), "cannot open"));
  }
}

TEST(RecordingBadInput, UnknownExtensionListsTheKnownFormats) {
  try {
    FormatFromPath("flight.xls");
    FAIL() << "expected InputError";
  } catch (const InputError& e) {
    EXPECT_TRUE(Contains(e.what(), "'.xls'"));
    EXPECT_TRUE(Contains(e.what(), ".ftrec"));
  }
}

// --- protobuf frames ------------------------------------------------------

std::string Varint(std::uint64_t v) {
  std::string out;
  do {
    unsigned char b = v & 0x7f;
    v >>= 7;
    if (v != 0) b |= 0x80;
    out += static_cast<char>(b);
  } while (v != 0);
  return out;
}

std::string Delimited(const google::protobuf::Message& m) {
  const std::string bytes = m.SerializeAsString();
  return Varint(bytes.size()) + bytes;
}

proto::RecordingHeader Header(const std::vector<std::string>& names) {
  proto::RecordingHeader h;
  h.set_magic("fluxtrim-recording");
  h.set_version(1);
  for (const std::string& n : names) h.add_channels()->set_name(n);
  h.set_time_channel("time");
  return h;
}

std::string FrameOf(const std::vector<double>& values) {
  proto::Frame f;
  for (double v : values) f.add_values(v);
  return Delimited(f);
}

InputError FramesError(const std::string& bytes,
                       const ReadOptions& options = {},
                       std::size_t chunk_rows = 1000,
                       std::size_t* rows_before = nullptr) {
  std::istringstream in(bytes);
  std::size_t rows = 0;
  try {
    FramesReader reader(in, "bad.ftrec", options);
    Table chunk;
    std::size_t n;
    while ((n = reader.ReadChunk(&chunk, chunk_rows)) > 0) rows += n;
  } catch (const InputError& e) {
    if (rows_before != nullptr) *rows_before = rows;
    return e;
  }
  ADD_FAILURE() << "no InputError";
  return InputError("none");
}

TEST(FramesBadInput, EmptyFileSaysAHeaderIsExpected) {
  const InputError e = FramesError("");
  EXPECT_EQ(e.file(), "bad.ftrec");
  EXPECT_TRUE(Contains(e.what(), "empty"));
  EXPECT_TRUE(Contains(e.what(), "RecordingHeader"));
}

TEST(FramesBadInput, HeaderWithoutFramesIsAnError) {
  const InputError e = FramesError(Delimited(Header({"time", "f"})));
  EXPECT_TRUE(Contains(e.what(), "not followed by any samples"));
}

TEST(FramesBadInput, WrongMagicIsNamed) {
  proto::RecordingHeader h = Header({"time"});
  h.set_magic("other-format");
  const InputError e = FramesError(Delimited(h) + FrameOf({0}));
  EXPECT_TRUE(Contains(e.what(), "frame 0 at byte offset 0"));
  EXPECT_TRUE(Contains(e.what(),
                       "wrong magic 'other-format': expected "
                       "'fluxtrim-recording'"));
}

TEST(FramesBadInput, UnsupportedVersionIsNamed) {
  proto::RecordingHeader h = Header({"time"});
  h.set_version(7);
  const InputError e = FramesError(Delimited(h) + FrameOf({0}));
  EXPECT_TRUE(Contains(e.what(), "format version 7 is not supported"));
  EXPECT_TRUE(Contains(e.what(), "expected version 1"));
}

TEST(FramesBadInput, CsvTextGivenAsFramesIsNotAHeader) {
  const InputError e = FramesError("time,bx\n0,1\n");
  EXPECT_TRUE(Contains(e.what(), "frame 0 at byte offset 0"));
}

TEST(FramesBadInput, MissingTimeChannelListsTheChannelsPresent) {
  const InputError e =
      FramesError(Delimited(Header({"t", "f"})) + FrameOf({0, 1}));
  EXPECT_TRUE(Contains(e.what(), "missing channel 'time'"));
  EXPECT_TRUE(Contains(e.what(), "t, f"));
}

TEST(FramesBadInput, RecordingCutMidFrameNamesFrameOffsetAndLengths) {
  const std::string header = Delimited(Header({"time", "f"}));
  const std::string frame1 = FrameOf({0, 1, 0.1, 2});
  const std::string frame2 = FrameOf({0.2, 3, 0.3, 4});
  const std::string bytes =
      header + frame1 + frame2.substr(0, frame2.size() - 5);
  std::size_t rows = 0;
  const InputError e = FramesError(bytes, {}, 1000, &rows);
  const std::string where = "frame 2 at byte offset " +
                            std::to_string(header.size() + frame1.size());
  EXPECT_TRUE(Contains(e.what(), where));
  EXPECT_TRUE(Contains(e.what(), "cut mid-frame"));
  EXPECT_TRUE(Contains(e.what(), "declared length " +
                                     std::to_string(frame2.size() - 1)));
  EXPECT_EQ(rows, 2u);  // the whole first frame came first
}

TEST(FramesBadInput, RecordingCutInsideALengthPrefixIsNamed) {
  const std::string bytes =
      Delimited(Header({"time"})) + FrameOf({0}) + "\x80";
  const InputError e = FramesError(bytes);
  EXPECT_TRUE(Contains(e.what(), "cut inside the length prefix"));
}

TEST(FramesBadInput, FrameLargerThanTheLimitIsRejectedBeforeReadingIt) {
  ReadOptions options;
  options.max_frame_bytes = 1000;
  const std::string header = Delimited(Header({"time"}));
  // A prefix declaring 5 GB, with no body: the reader must not try to
  // allocate it.
  const std::string bytes = header + Varint(5'000'000'000ull);
  const InputError e = FramesError(bytes, options);
  EXPECT_TRUE(Contains(e.what(),
                       "frame 1 at byte offset " +
                           std::to_string(header.size()) +
                           ": declared length 5000000000 exceeds the limit "
                           "1000"));
}

TEST(FramesBadInput, MalformedLengthPrefixIsRejected) {
  const std::string bytes =
      Delimited(Header({"time"})) + std::string(11, '\xff');
  const InputError e = FramesError(bytes);
  EXPECT_TRUE(Contains(e.what(), "malformed length prefix"));
}

TEST(FramesBadInput, ValuesThatAreNotWholeSamplesAreRejected) {
  const InputError e =
      FramesError(Delimited(Header({"time", "f"})) + FrameOf({0, 1, 2}));
  EXPECT_TRUE(Contains(e.what(), "frame 1"));
  EXPECT_TRUE(Contains(e.what(), "3 values is not a whole number of samples"));
}

TEST(FramesBadInput, GarbageFrameIsNotAValidFrameMessage) {
  const InputError e =
      FramesError(Delimited(Header({"time"})) + Varint(3) + "\xff\xff\xff");
  EXPECT_TRUE(Contains(e.what(), "not a valid Frame message"));
}

TEST(FramesBadInput, InfinityIsRejectedByDefaultAndAGapOnRequest) {
  const double inf = std::numeric_limits<double>::infinity();
  const std::string bytes =
      Delimited(Header({"time", "f"})) + FrameOf({0, 1, 1, inf});
  const InputError e = FramesError(bytes);
  EXPECT_TRUE(Contains(e.what(), "frame 1 at byte offset"));
  EXPECT_TRUE(Contains(e.what(), "sample 2, channel 'f'"));
  EXPECT_TRUE(Contains(e.what(), "finite number is expected"));

  ReadOptions gap;
  gap.non_finite = NonFinitePolicy::kGap;
  std::istringstream in(bytes);
  FramesReader reader(in, "gap.ftrec", gap);
  Table t;
  ASSERT_EQ(reader.ReadChunk(&t, 10), 2u);
  EXPECT_TRUE(std::isnan(t.Column("f")[1]));
}

TEST(FramesBadInput, TimesGoingBackwardsOrRepeatingAreRejected) {
  std::size_t rows = 0;
  const InputError back = FramesError(
      Delimited(Header({"time"})) + FrameOf({0, 1}) + FrameOf({0.5}), {}, 1000,
      &rows);
  EXPECT_TRUE(Contains(back.what(), "frame 2"));
  EXPECT_TRUE(Contains(back.what(), "goes backwards"));
  EXPECT_EQ(rows, 2u);
  const InputError dup =
      FramesError(Delimited(Header({"time"})) + FrameOf({0, 1, 1}));
  EXPECT_TRUE(Contains(dup.what(), "sample 3"));
  EXPECT_TRUE(Contains(dup.what(), "duplicate"));
}

TEST(FramesBadInput, MissingTimeInASampleIsRejected) {
  const double nan = std::numeric_limits<double>::quiet_NaN();
  const InputError e =
      FramesError(Delimited(Header({"time", "f"})) + FrameOf({nan, 1}));
  EXPECT_TRUE(Contains(e.what(), "time is missing"));
}

// --- the command line -----------------------------------------------------

TEST(CommandLineBadInput, ExitsWithCodeOneAndNamesThePlace) {
  const std::string path = ::testing::TempDir() + "bad_input_cli_" +
                           std::to_string(::getpid()) + ".csv";
  {
    std::ofstream out(path);
    out << "time,bx,by,bz\n0,1,2,3\n0.1,1,oops,3\n";
  }
  const std::string command =
      std::string(FLUXTRIM_EXE) + " inspect " + path + " 2>&1";
  const test_support::CommandResult run = test_support::RunCommand(command);
  ASSERT_NE(run.code, -1) << run.output;
  EXPECT_EQ(run.code, 1) << run.output;
  EXPECT_TRUE(Contains(run.output, path + ":3:7"));
  EXPECT_TRUE(Contains(run.output, "expected a number, found 'oops'"));
}

}  // namespace
}  // namespace fluxtrim::io
