// Protobuf frame recordings: the byte layout is the one of protobuf's own
// delimited-message utilities (the outside reference here), samples cross
// frame and chunk boundaries intact, and a pipe delivers whole frames as
// they come.

#include "io/frames.h"

#include <unistd.h>

#include <cmath>
#include <cstdint>
#include <cstring>
#include <limits>
#include <sstream>
#include <string>
#include <vector>

#include <google/protobuf/io/zero_copy_stream_impl_lite.h>
#include <google/protobuf/util/delimited_message_util.h>
#include <gtest/gtest.h>

#include "io/error.h"
#include "proto/recording.pb.h"

namespace fluxtrim::io {
namespace {

using google::protobuf::util::ParseDelimitedFromZeroCopyStream;
using google::protobuf::util::SerializeDelimitedToOstream;

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();

std::uint64_t Bits(double v) {
  std::uint64_t b;
  std::memcpy(&b, &v, sizeof b);
  return b;
}

Table Sample(std::size_t rows) {
  Table t({{"time", "s", "seconds of day"},
           {"f", "nT", "scalar field"},
           {"i_motor", "A", ""}});
  for (std::size_t r = 0; r < rows; ++r) {
    t.Column("time").push_back(1000.0 + 0.1 * static_cast<double>(r));
    t.Column("f").push_back(r % 13 == 0 ? kNaN
                                        : 51234.5 + std::sin(0.01 * r));
    t.Column("i_motor").push_back(-0.0 + 1e-310 * static_cast<double>(r));
  }
  return t;
}

std::string WriteFrames(const Table& t, const WriteOptions& options = {}) {
  std::ostringstream out;
  FramesWriter writer(out, "out.ftrec", t.Schema(), options);
  writer.Write(t);
  writer.Close();
  return out.str();
}

Table ReadFrames(const std::string& bytes, std::size_t chunk_rows,
                 const ReadOptions& options = {}) {
  std::istringstream in(bytes);
  FramesReader reader(in, "in.ftrec", options);
  Table all(reader.channels());
  Table chunk;
  while (reader.ReadChunk(&chunk, chunk_rows) > 0) all.Append(chunk);
  return all;
}

void ExpectSameBits(const Table& a, const Table& b) {
  ASSERT_EQ(a.cols(), b.cols());
  ASSERT_EQ(a.rows(), b.rows());
  for (std::size_t c = 0; c < a.cols(); ++c) {
    EXPECT_EQ(a.channel(c).info.name, b.channel(c).info.name);
    for (std::size_t r = 0; r < a.rows(); ++r) {
      ASSERT_EQ(Bits(a.channel(c).values[r]), Bits(b.channel(c).values[r]))
          << a.channel(c).info.name << " row " << r;
    }
  }
}

TEST(FramesWriter, OutputParsesWithProtobufsDelimitedMessageUtilities) {
  const Table t = Sample(10000);
  WriteOptions options;
  options.comment = "invented test flight";
  const std::string bytes = WriteFrames(t, options);

  google::protobuf::io::ArrayInputStream stream(bytes.data(),
                                                static_cast<int>(bytes.size()));
  proto::RecordingHeader header;
  bool clean_eof = false;
  ASSERT_TRUE(ParseDelimitedFromZeroCopyStream(&header, &stream, &clean_eof));
  EXPECT_EQ(header.magic(), "fluxtrim-recording");
  EXPECT_EQ(header.version(), 1u);
  EXPECT_EQ(header.time_channel(), "time");
  EXPECT_EQ(header.comment(), "invented test flight");
  ASSERT_EQ(header.channels_size(), 3);
  EXPECT_EQ(header.channels(1).name(), "f");
  EXPECT_EQ(header.channels(1).unit(), "nT");
  EXPECT_EQ(header.channels(1).long_name(), "scalar field");

  std::vector<int> frame_values;
  std::size_t row = 0;
  for (;;) {
    proto::Frame frame;
    if (!ParseDelimitedFromZeroCopyStream(&frame, &stream, &clean_eof)) break;
    frame_values.push_back(frame.values_size());
    for (int i = 0; i < frame.values_size(); i += 3, ++row) {
      EXPECT_EQ(Bits(frame.values(i)), Bits(t.Column("time")[row]));
      EXPECT_EQ(Bits(frame.values(i + 1)), Bits(t.Column("f")[row]));
      EXPECT_EQ(Bits(frame.values(i + 2)), Bits(t.Column("i_motor")[row]));
    }
  }
  EXPECT_TRUE(clean_eof);
  EXPECT_EQ(row, 10000u);
  // 10000 rows in frames of at most FramesWriter::kMaxRowsPerFrame samples.
  EXPECT_EQ(frame_values, (std::vector<int>{4096 * 3, 4096 * 3, 1808 * 3}));
}

TEST(FramesReader, ReadsMessagesWrittenByProtobufsDelimitedUtilities) {
  std::ostringstream out;
  proto::RecordingHeader header;
  header.set_magic("fluxtrim-recording");
  header.set_version(1);
  header.add_channels()->set_name("time");
  auto* bx = header.add_channels();
  bx->set_name("bx");
  bx->set_unit("nT");
  header.set_comment("made by protobuf");
  ASSERT_TRUE(SerializeDelimitedToOstream(header, &out));
  proto::Frame frame;
  for (double v : {0.0, 10.0, 0.1, 11.0}) frame.add_values(v);
  ASSERT_TRUE(SerializeDelimitedToOstream(frame, &out));
  proto::Frame empty;  // a keep-alive with no samples
  ASSERT_TRUE(SerializeDelimitedToOstream(empty, &out));
  proto::Frame last;
  for (double v : {0.2, kNaN}) last.add_values(v);
  ASSERT_TRUE(SerializeDelimitedToOstream(last, &out));

  std::istringstream in(out.str());
  FramesReader reader(in, "pb.ftrec");
  EXPECT_EQ(reader.comment(), "made by protobuf");
  ASSERT_EQ(reader.channels().size(), 2u);
  EXPECT_EQ(reader.channels()[1].unit, "nT");
  Table t;
  ASSERT_EQ(reader.ReadChunk(&t, 100), 3u);
  EXPECT_EQ(t.Column("time"), (std::vector<double>{0.0, 0.1, 0.2}));
  EXPECT_EQ(t.Column("bx")[1], 11.0);
  EXPECT_TRUE(std::isnan(t.Column("bx")[2]));
  EXPECT_EQ(reader.ReadChunk(&t, 100), 0u);
}

TEST(FramesReader, ReturnsTheSameSamplesWhateverTheChunkSize) {
  const Table t = Sample(9000);
  const std::string bytes = WriteFrames(t);
  for (std::size_t chunk : {1u, 7u, 4096u, 4097u, 100000u}) {
    SCOPED_TRACE(chunk);
    ExpectSameBits(ReadFrames(bytes, chunk), t);
  }
}

TEST(FramesReader, KeepsUnitsAndLongNamesAndAppliesMap) {
  ReadOptions options;
  options.rename["current"] = "I_MOTOR";
  std::istringstream in(WriteFrames(Sample(3)));
  FramesReader reader(in, "in.ftrec", options);
  ASSERT_EQ(reader.channels().size(), 3u);
  EXPECT_EQ(reader.channels()[0].long_name, "seconds of day");
  EXPECT_EQ(reader.channels()[2].name, "current");
  EXPECT_EQ(reader.channels()[2].unit, "A");
}

TEST(FramesReader, ReadsTheHeadersDeclaredTimeChannelAsTime) {
  std::ostringstream out;
  proto::RecordingHeader header;
  header.set_magic("fluxtrim-recording");
  header.set_version(1);
  header.add_channels()->set_name("f");
  header.add_channels()->set_name("gps_seconds");
  header.set_time_channel("gps_seconds");
  ASSERT_TRUE(SerializeDelimitedToOstream(header, &out));
  proto::Frame frame;
  for (double v : {51000.0, 7.0}) frame.add_values(v);
  ASSERT_TRUE(SerializeDelimitedToOstream(frame, &out));

  std::istringstream in(out.str());
  FramesReader reader(in, "declared.ftrec");
  ASSERT_EQ(reader.channels().size(), 2u);
  EXPECT_EQ(reader.channels()[1].name, "time");
  Table t;
  ASSERT_EQ(reader.ReadChunk(&t, 10), 1u);
  EXPECT_EQ(t.Column("time")[0], 7.0);

  header.set_time_channel("clock");  // not a channel: an error naming it
  std::ostringstream bad;
  ASSERT_TRUE(SerializeDelimitedToOstream(header, &bad));
  std::istringstream bad_in(bad.str());
  try {
    FramesReader r(bad_in, "bad.ftrec");
    FAIL() << "expected InputError";
  } catch (const InputError& e) {
    EXPECT_NE(std::string(e.what()).find("time channel 'clock' is not one"),
              std::string::npos)
        << e.what();
  }
}

TEST(FramesReader, ReadsAFileByPath) {
  const std::string path = ::testing::TempDir() + "frames_test_" +
                           std::to_string(::getpid()) + ".ftrec";
  const Table t = Sample(5000);
  {
    FramesWriter writer(path, t.Schema());
    writer.Write(t);
    writer.Close();
  }
  FramesReader reader(path);
  Table all(reader.channels());
  Table chunk;
  while (reader.ReadChunk(&chunk, 1000) > 0) all.Append(chunk);
  ExpectSameBits(all, t);
}

TEST(FramesReader, ReturnsWholeFramesWaitingInAPipeWithoutWaitingForMore) {
  int fds[2];
  ASSERT_EQ(::pipe(fds), 0);
  std::ostringstream first;
  FramesWriter writer(first, "pipe", Sample(1).Schema());
  writer.Write(Sample(2));
  writer.Flush();
  const std::string bytes = first.str();
  ASSERT_EQ(::write(fds[1], bytes.data(), bytes.size()),
            static_cast<ssize_t>(bytes.size()));
  FramesReader reader(std::make_unique<FdSource>(fds[0], true), "pipe");
  Table chunk;
  // The write end stays open: waiting for a full chunk would block.
  EXPECT_EQ(reader.ReadChunk(&chunk, 1000), 2u);
  ::close(fds[1]);
  EXPECT_EQ(reader.ReadChunk(&chunk, 1000), 0u);
}

}  // namespace
}  // namespace fluxtrim::io
