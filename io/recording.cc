#include "io/recording.h"

#include <algorithm>
#include <cctype>
#include <utility>
#include <vector>

#include "io/csv.h"
#include "io/error.h"
#include "io/frames.h"
#include "io/gdf2.h"

namespace fluxtrim::io {
namespace {

// Rows per chunk when a whole recording is read or written.
constexpr std::size_t kChunkRows = 1 << 16;

std::string LowerExtension(const std::string& path) {
  const std::size_t slash = path.find_last_of('/');
  const std::size_t dot = path.find_last_of('.');
  if (dot == std::string::npos || (slash != std::string::npos && dot < slash)) {
    return "";
  }
  std::string ext = path.substr(dot);
  std::transform(ext.begin(), ext.end(), ext.begin(), [](unsigned char c) {
    return static_cast<char>(std::tolower(c));
  });
  return ext;
}

}  // namespace

Format FormatFromPath(const std::string& path) {
  if (path == "-") return Format::kCsv;
  const std::string ext = LowerExtension(path);
  if (ext == ".csv") return Format::kCsv;
  if (ext == ".dfn" || ext == ".dat") return Format::kGdf2;
  if (ext == ".ftrec") return Format::kFrames;
  throw InputError(path, 0, 0,
                   (ext.empty() ? std::string("no file extension")
                                : "unknown extension '" + ext + "'") +
                       ": expected .csv (CSV), .dfn or .dat (ASEG-GDF2), "
                       ".ftrec (protobuf frames), or - (CSV on standard "
                       "input/output)");
}

std::unique_ptr<RecordingReader> OpenRecording(const std::string& path,
                                               const ReadOptions& options) {
  switch (FormatFromPath(path)) {
    case Format::kCsv:
      return std::make_unique<CsvReader>(path, options);
    case Format::kGdf2:
      return OpenGdf2Reader(path, options);
    case Format::kFrames:
      return std::make_unique<FramesReader>(path, options);
  }
  throw InputError(path, 0, 0, "unknown recording format");
}

Table ReadRecording(const std::string& path, const ReadOptions& options) {
  std::unique_ptr<RecordingReader> reader = OpenRecording(path, options);
  // Chunks kept whole and joined once with the columns sized exactly: one
  // copy of the data instead of the two to three of a growing table.
  std::vector<Table> chunks;
  std::size_t rows = 0;
  for (;;) {
    Table chunk(reader->channels());
    const std::size_t n = reader->ReadChunk(&chunk, kChunkRows);
    if (n == 0) break;
    rows += n;
    chunks.push_back(std::move(chunk));
  }
  if (chunks.size() == 1) return std::move(chunks.front());
  Table table(reader->channels());
  for (std::size_t c = 0; c < table.cols(); ++c) {
    table.channel(c).values.reserve(rows);
  }
  for (Table& chunk : chunks) {
    table.Append(chunk);
    chunk = Table();
  }
  return table;
}

std::unique_ptr<RecordingWriter> CreateRecordingWriter(
    const std::string& path, const std::vector<ChannelInfo>& schema,
    const WriteOptions& options) {
  switch (FormatFromPath(path)) {
    case Format::kCsv:
      return std::make_unique<CsvWriter>(path, schema, options);
    case Format::kGdf2:
      return CreateGdf2Writer(path, schema, options);
    case Format::kFrames:
      return std::make_unique<FramesWriter>(path, schema, options);
  }
  throw InputError(path, 0, 0, "unknown recording format");
}

void WriteRecording(const std::string& path, const Table& table,
                    const WriteOptions& options) {
  std::unique_ptr<RecordingWriter> writer =
      CreateRecordingWriter(path, table.Schema(), options);
  writer->Write(table);
  writer->Close();
}

}  // namespace fluxtrim::io
