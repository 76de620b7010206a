#pragma once
// CSV recordings: one header row of channel names, then one row per sample.
//
// Reading
//   - Fields are separated by commas. Header names are trimmed and may be
//     double-quoted ("bx", "a ""b"""); they match case-insensitively and
//     keep the spelling of the file.
//   - Lines whose first non-blank character is `#` are comments, wherever
//     they are; blank lines are skipped; CRLF and LF line ends; a UTF-8 byte
//     order mark before the header is ignored.
//   - Units: a comment `# units: s,nT,,deg` before the header gives one unit
//     per column (empty = default). Without it, or where it is empty, the
//     unit follows the canonical name (DefaultUnit()).
//   - Numbers are parsed with std::from_chars (round-to-nearest, exact):
//     blanks around a number and a leading `+` are accepted. An empty field
//     is a missing value (NaN). `nan`, `inf`, `-inf`, `infinity` text follows
//     ReadOptions::non_finite. Numbers beyond the range of a double are
//     errors.
//   - The time channel ("time" after ReadOptions::rename) must be present,
//     finite in every row, and increasing (ReadOptions::time_order decides on
//     backwards or repeated times).
//   - Errors are InputError with the file, the 1-based line and the 1-based
//     column (character) of the offending field, the channel, and what was
//     expected. Rows before a bad line are returned by ReadChunk() first; the
//     next call throws.
//
// Writing
//   - Optional `# <comment>` lines, then `# units: ...` (when any channel has
//     a unit), then the header, then rows. Numbers use std::to_chars without
//     a precision: the shortest text that reads back to the same double
//     (round-trip exact, including -0 and subnormals). NaN is an empty field;
//     infinities are written as `inf` / `-inf`. LF line ends.

#include <cstddef>
#include <cstdint>
#include <istream>
#include <memory>
#include <ostream>
#include <string>
#include <string_view>
#include <vector>

#include "io/byte_source.h"
#include "io/error.h"
#include "io/recording.h"
#include "io/table.h"

namespace fluxtrim::io {

// Unit of a canonical channel name (case-insensitive): time "s"; bx, by, bz,
// f "nT"; roll, pitch, heading, lat, lon "deg"; alt "m"; otherwise "".
std::string DefaultUnit(std::string_view name);

class CsvReader : public RecordingReader {
 public:
  // Longest line accepted, in bytes (protects memory against a file that is
  // not line-oriented).
  static constexpr std::size_t kMaxLineBytes = std::size_t{1} << 20;

  // Opens a file ("-": standard input). Reads up to the header.
  explicit CsvReader(const std::string& path, const ReadOptions& options = {});
  // Reads a stream that outlives the reader; `name` is used in messages.
  CsvReader(std::istream& in, std::string name,
            const ReadOptions& options = {});
  // Reads any byte source (e.g. FdSource on a socket).
  CsvReader(std::unique_ptr<ByteSource> source, std::string name,
            const ReadOptions& options = {});
  ~CsvReader() override;

  const std::vector<ChannelInfo>& channels() const override {
    return channels_;
  }
  // Fills *chunk with up to max_rows rows. Fewer rows are returned before
  // the end only when the input is a pipe or socket with no more bytes
  // waiting (so a real-time consumer gets every complete line at once).
  std::size_t ReadChunk(Table* chunk, std::size_t max_rows) override;
  const std::string& path() const override { return name_; }

  // Last line number consumed (1-based).
  std::size_t line() const { return line_; }
  // Rows returned so far.
  std::uint64_t rows_read() const { return rows_read_; }

 private:
  enum class LineStatus { kLine, kEnd, kWouldBlock };
  LineStatus NextLine(bool block, std::string_view* line, bool* has_newline);
  void ReadHeader();
  // Parses one data line into row_; throws InputError.
  void ParseRow(std::string_view line, bool has_newline);
  double ParseFieldSlow(const char* begin, const char* line_begin,
                        const char* line_end, std::size_t index,
                        const char** next);
  double NonFinite(double value, const char* begin, const char* end,
                   const char* line_begin, std::size_t index);
  [[noreturn]] void FieldCountError(std::string_view line, bool has_newline);
  [[noreturn]] void Fail(std::size_t column, const std::string& message) const;

  std::string name_;
  ReadOptions options_;
  InputBuffer input_;
  std::vector<ChannelInfo> channels_;
  std::size_t time_index_ = 0;
  std::size_t header_line_ = 0;
  std::size_t line_ = 0;
  std::size_t scanned_ = 0;  // bytes of input_ known to hold no newline
  std::vector<double> row_;
  bool have_last_time_ = false;
  double last_time_ = 0;
  std::size_t last_time_line_ = 0;
  std::uint64_t rows_read_ = 0;
  bool ended_ = false;
  // An error met after some rows of a chunk were parsed: thrown by the next
  // ReadChunk so that the good rows are delivered first.
  std::unique_ptr<InputError> pending_error_;
};

class CsvWriter : public RecordingWriter {
 public:
  // Creates (truncates) a file; "-" is standard output. Throws
  // std::runtime_error when the file cannot be created and
  // std::invalid_argument for an empty or repeated channel name.
  CsvWriter(const std::string& path, const std::vector<ChannelInfo>& schema,
            const WriteOptions& options = {});
  // Writes to a stream that outlives the writer.
  CsvWriter(std::ostream& out, std::string name,
            const std::vector<ChannelInfo>& schema,
            const WriteOptions& options = {});
  ~CsvWriter() override;

  void Write(const Table& chunk) override;
  // Hands buffered rows to the stream and flushes it (for real-time output).
  void Flush();
  void Close() override;

 private:
  void WriteHeader(const WriteOptions& options);
  void Drain();

  std::string name_;
  std::unique_ptr<std::ostream> owned_;
  std::ostream* out_;
  std::vector<ChannelInfo> schema_;
  std::vector<char> buffer_;  // formatted rows not yet handed to out_
  std::size_t used_ = 0;
  bool closed_ = false;
};

}  // namespace fluxtrim::io
