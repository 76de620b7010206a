// libFuzzer target for the protobuf frames reader (and the writer on what it
// read). The input bytes are the recording; the last byte picks the
// policies. Bad input must end in InputError only; whatever reads must write
// and read back to the same names, units and bits.

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <sstream>
#include <string>

#include "io/error.h"
#include "io/frames.h"

namespace {

using fluxtrim::io::FramesReader;
using fluxtrim::io::FramesWriter;
using fluxtrim::io::InputError;
using fluxtrim::io::ReadOptions;
using fluxtrim::io::Table;

bool SameBits(double a, double b) {
  if (std::isnan(a) || std::isnan(b)) return std::isnan(a) && std::isnan(b);
  return std::memcmp(&a, &b, sizeof a) == 0;
}

Table ReadAll(const std::string& bytes, const ReadOptions& options,
              std::size_t chunk_rows) {
  std::istringstream in(bytes);
  FramesReader reader(in, "fuzz.ftrec", options);
  Table whole(reader.channels());
  Table chunk;
  std::size_t n;
  while ((n = reader.ReadChunk(&chunk, chunk_rows)) > 0) {
    if (chunk.rows() != n || chunk.cols() != reader.channels().size()) abort();
    whole.Append(chunk);
  }
  return whole;
}

void RoundTrip(const Table& table, std::size_t max_frame_bytes) {
  std::ostringstream out;
  {
    FramesWriter writer(out, "rt.ftrec", table.Schema());
    writer.Write(table);
    writer.Close();
  }
  ReadOptions options;
  options.non_finite = fluxtrim::io::NonFinitePolicy::kGap;
  options.time_order = fluxtrim::io::TimeOrderPolicy::kAccept;
  options.max_frame_bytes = max_frame_bytes;
  const Table back = ReadAll(out.str(), options, 3);
  if (back.rows() != table.rows() || back.cols() != table.cols()) abort();
  for (std::size_t c = 0; c < table.cols(); ++c) {
    const auto& a = table.channel(c);
    const auto& b = back.channel(c);
    if (a.info.name != b.info.name || a.info.unit != b.info.unit ||
        a.info.long_name != b.info.long_name) {
      abort();
    }
    for (std::size_t r = 0; r < a.values.size(); ++r) {
      if (std::isinf(a.values[r])) continue;  // a gap by policy on re-read
      if (!SameBits(a.values[r], b.values[r])) abort();
    }
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data,
                                      std::size_t size) {
  const std::string bytes(reinterpret_cast<const char*>(data), size);
  ReadOptions options;
  // A small limit keeps the fuzzer's memory in check; a recording the
  // fuzzer can write is far below it.
  options.max_frame_bytes = 1 << 20;
  const std::uint8_t flags = size > 0 ? data[size - 1] : 0;
  if (flags & 1) options.non_finite = fluxtrim::io::NonFinitePolicy::kGap;
  if (flags & 2) options.time_order = fluxtrim::io::TimeOrderPolicy::kAccept;
  if (flags & 4) options.rename["time"] = "t";
  if (flags & 8) options.max_frame_bytes = 64;
  const std::size_t chunk_rows = 1 + (flags >> 4);
  Table whole;
  try {
    whole = ReadAll(bytes, options, chunk_rows);
  } catch (const InputError& e) {
    if (std::strlen(e.what()) == 0) abort();
    return 0;
  }
  if (whole.rows() == 0) abort();  // a header without samples is an error
  // The writer splits into frames of at most 4096 samples; the limit must
  // hold them.
  RoundTrip(whole, std::size_t{64} << 20);
  return 0;
}
