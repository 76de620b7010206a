#pragma once
// Reading and writing recordings in every supported format, whole or chunk by
// chunk. The format follows the file name:
//   .csv                      CSV with a header row (csv.h)
//   .dfn or .dat              ASEG-GDF2 definition + data pair (gdf2.h)
//   .ftrec                    length-delimited protobuf frames (frames.h)
// A path of "-" means standard input/output in CSV.

#include <cstddef>
#include <map>
#include <memory>
#include <string>
#include <vector>

#include "io/table.h"

namespace fluxtrim::io {

enum class Format { kCsv, kGdf2, kFrames };

// Throws InputError for an extension it does not know.
Format FormatFromPath(const std::string& path);

// What to do with "nan", "inf" and similar text where a number must be.
enum class NonFinitePolicy {
  kReject,  // InputError naming the place (default)
  kGap,     // store NaN: the sample becomes a gap in that channel
};

// What to do with times that go backwards or repeat.
enum class TimeOrderPolicy {
  kReject,  // InputError naming the place (default)
  kAccept,  // keep the rows; inspect counts them
};

struct ReadOptions {
  // --map name=COLUMN: canonical channel name -> column name in the file.
  // The column is read under the canonical name.
  std::map<std::string, std::string> rename;
  NonFinitePolicy non_finite = NonFinitePolicy::kReject;
  TimeOrderPolicy time_order = TimeOrderPolicy::kReject;
  // Channels that must be present (after renaming); "time" is always
  // required. A missing one is an InputError naming the file and the
  // channels it does have.
  std::vector<std::string> required;
  // Largest protobuf message accepted, in bytes (a sane limit against a
  // corrupt length prefix).
  std::size_t max_frame_bytes = 64u << 20;
};

// Chunked reader: bounded memory whatever the file size.
class RecordingReader {
 public:
  virtual ~RecordingReader() = default;
  // Channels in file order, after renaming.
  virtual const std::vector<ChannelInfo>& channels() const = 0;
  // Replaces the rows of *chunk (schema = channels()) with up to max_rows
  // further samples. Returns the number of rows read; 0 at the end.
  // Throws InputError on bad input; rows returned before are valid.
  virtual std::size_t ReadChunk(Table* chunk, std::size_t max_rows) = 0;
  virtual const std::string& path() const = 0;
};

std::unique_ptr<RecordingReader> OpenRecording(const std::string& path,
                                               const ReadOptions& options = {});

// Reads the whole recording into memory.
Table ReadRecording(const std::string& path, const ReadOptions& options = {});

class RecordingWriter {
 public:
  virtual ~RecordingWriter() = default;
  // Appends the rows of chunk (same schema as given at creation).
  virtual void Write(const Table& chunk) = 0;
  // Flushes and closes; throws std::runtime_error on an I/O failure.
  virtual void Close() = 0;
};

struct WriteOptions {
  std::string comment;  // written as a comment where the format allows
};

std::unique_ptr<RecordingWriter> CreateRecordingWriter(
    const std::string& path, const std::vector<ChannelInfo>& schema,
    const WriteOptions& options = {});

void WriteRecording(const std::string& path, const Table& table,
                    const WriteOptions& options = {});

}  // namespace fluxtrim::io
