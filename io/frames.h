#pragma once
// Recordings as length-delimited protobuf messages (io/proto/recording.proto):
// each message is preceded by its size in bytes as a base-128 varint, the
// framing of google::protobuf::util::SerializeDelimitedToOstream. Message 0
// is a RecordingHeader (magic "fluxtrim-recording", version 1, the channels);
// messages 1, 2, ... are Frames holding whole samples, row-major:
// values[r * channels + c] is sample r of channel c.
//
// Messages are numbered in errors as "frame N at byte offset X", the header
// being frame 0 at byte offset 0; X is the offset of the frame's length
// prefix. The reader never trusts a length prefix: a declared length above
// ReadOptions::max_frame_bytes is an error before anything is allocated.
//
// Channels: the header's time_channel, when it names a channel other than
// "time" and the file has no "time", is read as "time" (unless
// ReadOptions::rename maps "time" itself).
//
// Values: NaN is a missing value. +-Inf follow ReadOptions::non_finite. The
// time channel ("time" after ReadOptions::rename) must be finite in every
// sample and increasing (ReadOptions::time_order). Frames with no values are
// allowed (keep-alives on a stream).

#include <cstddef>
#include <cstdint>
#include <istream>
#include <memory>
#include <ostream>
#include <string>
#include <vector>

#include "io/byte_source.h"
#include "io/error.h"
#include "io/recording.h"
#include "io/table.h"

namespace fluxtrim::proto {
class Frame;
}  // namespace fluxtrim::proto

namespace fluxtrim::io {

inline constexpr const char* kFramesMagic = "fluxtrim-recording";
inline constexpr std::uint32_t kFramesVersion = 1;

class FramesReader : public RecordingReader {
 public:
  // Opens a file ("-": standard input). Reads the header.
  explicit FramesReader(const std::string& path,
                        const ReadOptions& options = {});
  // Reads a stream that outlives the reader; `name` is used in messages.
  FramesReader(std::istream& in, std::string name,
               const ReadOptions& options = {});
  // Reads any byte source (e.g. FdSource on a socket).
  FramesReader(std::unique_ptr<ByteSource> source, std::string name,
               const ReadOptions& options = {});
  ~FramesReader() override;

  const std::vector<ChannelInfo>& channels() const override {
    return channels_;
  }
  // Fills *chunk with up to max_rows samples; a frame may be split across
  // chunks. Fewer rows are returned before the end only when the input is a
  // pipe or socket with no complete frame waiting.
  std::size_t ReadChunk(Table* chunk, std::size_t max_rows) override;
  const std::string& path() const override { return name_; }

  const std::string& comment() const { return comment_; }
  // Frames read so far, the header included.
  std::uint64_t frames_read() const { return frame_index_; }

 private:
  enum class Status { kMessage, kEnd, kWouldBlock };
  // Next whole message into message_; throws InputError for a bad prefix,
  // an oversized or a cut message.
  Status NextMessage(bool block);
  void ReadHeader();
  // Checks and converts the pending frame's sample `r` into the chunk.
  // Checks sample r of frame_ into row_; throws InputError.
  void CheckSample(std::size_t r);
  std::string Place() const;
  [[noreturn]] void Fail(const std::string& message) const;

  std::string name_;
  ReadOptions options_;
  InputBuffer input_;
  std::vector<ChannelInfo> channels_;
  std::string comment_;
  std::size_t time_index_ = 0;

  // The message just read (valid until the next NextMessage) and where it
  // was.
  const char* message_data_ = nullptr;
  std::size_t message_size_ = 0;
  std::uint64_t frame_index_ = 0;   // index of the next message
  std::uint64_t message_index_ = 0;  // index of message_
  std::uint64_t message_offset_ = 0;

  // The current frame; samples from next_sample_ on are not returned yet.
  std::unique_ptr<proto::Frame> frame_;
  std::vector<double> row_;
  std::size_t next_sample_ = 0;
  std::size_t samples_ = 0;

  bool have_last_time_ = false;
  double last_time_ = 0;
  std::uint64_t rows_read_ = 0;
  bool ended_ = false;
  std::unique_ptr<InputError> pending_error_;
};

class FramesWriter : public RecordingWriter {
 public:
  // Samples per Frame message at most (a Write of more rows makes several).
  static constexpr std::size_t kMaxRowsPerFrame = 4096;

  // Creates (truncates) a file; "-" is standard output. Throws
  // std::runtime_error when the file cannot be created and
  // std::invalid_argument for an empty or repeated channel name.
  FramesWriter(const std::string& path,
               const std::vector<ChannelInfo>& schema,
               const WriteOptions& options = {});
  // Writes to a stream that outlives the writer.
  FramesWriter(std::ostream& out, std::string name,
               const std::vector<ChannelInfo>& schema,
               const WriteOptions& options = {});
  ~FramesWriter() override;

  void Write(const Table& chunk) override;
  void Flush();
  void Close() override;

 private:
  void WriteHeader(const WriteOptions& options);
  void WriteMessage(const std::string& bytes);

  std::string name_;
  std::unique_ptr<std::ostream> owned_;
  std::ostream* out_;
  std::vector<ChannelInfo> schema_;
  std::unique_ptr<proto::Frame> frame_;
  std::string scratch_;
  bool closed_ = false;
};

}  // namespace fluxtrim::io
