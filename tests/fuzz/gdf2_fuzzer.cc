// libFuzzer target for the ASEG-GDF2 reader (and the writer on what it read).
// Input: the .dfn text, a 0 byte (or, when there is none, the first blank
// line "\n\n"), then the .dat text. The last byte picks the policies.
// Bad input must end in InputError only; whatever reads must write and read
// back to the same bits.

#include <cmath>
#include <cstddef>
#include <cstdint>
#include <cstdio>
#include <cstdlib>
#include <cstring>
#include <sstream>
#include <string>
#include <string_view>
#include <vector>

#include "io/error.h"
#include "io/gdf2.h"

namespace {

using fluxtrim::io::Gdf2Reader;
using fluxtrim::io::InputError;
using fluxtrim::io::ReadOptions;
using fluxtrim::io::Table;

constexpr std::size_t kMaxRoundTripChannels = 256;

bool SameBits(double a, double b) {
  if (std::isnan(a) || std::isnan(b)) return std::isnan(a) && std::isnan(b);
  return std::memcmp(&a, &b, sizeof(a)) == 0;
}

void RoundTrip(const Table& table) {
  std::ostringstream dfn, dat;
  std::unique_ptr<fluxtrim::io::RecordingWriter> writer;
  try {
    writer = fluxtrim::io::CreateGdf2Writer(dfn, dat, table.Schema(), {});
    writer->Write(table);
    writer->Close();
  } catch (const InputError&) {
    return;  // a name GDF2 cannot carry (e.g. with a blank)
  } catch (const std::runtime_error&) {
    return;  // a value equal to the writer's null
  }
  std::istringstream d(dfn.str()), a(dat.str());
  ReadOptions options;
  options.non_finite = fluxtrim::io::NonFinitePolicy::kGap;
  options.time_order = fluxtrim::io::TimeOrderPolicy::kAccept;
  Table back, chunk;
  try {
    Gdf2Reader reader(d, "rt.dfn", a, "rt.dat", options);
    back = Table(reader.channels());
    while (reader.ReadChunk(&chunk, 64) > 0) back.Append(chunk);
  } catch (const InputError& e) {
    // What the writer wrote must read back.
    std::fprintf(stderr, "round trip failed: %s\n", e.what());
    abort();
  }
  if (back.rows() != table.rows() || back.cols() != table.cols()) abort();
  // The writer puts the time channel first and keeps the others in order
  // (gdf2.h); look-ups by name would be quadratic in the channel count.
  std::vector<std::size_t> order;
  const int time = table.Find("time");
  if (time >= 0) order.push_back(static_cast<std::size_t>(time));
  for (std::size_t c = 0; c < table.cols(); ++c) {
    if (static_cast<int>(c) != time) order.push_back(c);
  }
  for (std::size_t k = 0; k < order.size(); ++k) {
    const std::size_t c = order[k];
    if (!fluxtrim::io::EqualsIgnoreCase(back.channel(k).info.name,
                                        table.channel(c).info.name)) {
      abort();
    }
    const auto& want = table.channel(c).values;
    const auto& got = back.channel(k).values;
    for (std::size_t r = 0; r < want.size(); ++r) {
      if (std::isinf(want[r])) continue;  // read back as a gap by policy
      if (!SameBits(want[r], got[r])) abort();
    }
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data,
                                      std::size_t size) {
  const std::string_view in(reinterpret_cast<const char*>(data), size);
  std::size_t split = in.find('\0');
  std::size_t skip = 1;
  if (split == std::string_view::npos) {
    split = in.find("\n\n");
    skip = 2;
  }
  if (split == std::string_view::npos) {
    split = in.size();
    skip = 0;
  }
  const std::string dfn_text(in.substr(0, split));
  const std::string dat_text(in.substr(split + skip));
  ReadOptions options;
  const std::uint8_t flags = size > 0 ? data[size - 1] : 0;
  if (flags & 1) options.non_finite = fluxtrim::io::NonFinitePolicy::kGap;
  if (flags & 2) options.time_order = fluxtrim::io::TimeOrderPolicy::kAccept;
  if (flags & 4) options.rename["time"] = "FIDTIME";

  std::istringstream dfn(dfn_text), dat(dat_text);
  Table whole;
  try {
    Gdf2Reader reader(dfn, "fuzz.dfn", dat, "fuzz.dat", options);
    // Table's name look-ups are linear per channel: the round trip (three
    // more tables) is kept to inputs of modest width.
    const bool keep = reader.channels().size() <= kMaxRoundTripChannels;
    if (keep) whole = Table(reader.channels());
    Table chunk;
    std::size_t n;
    while ((n = reader.ReadChunk(&chunk, 7)) > 0) {
      if (chunk.rows() != n || chunk.cols() != reader.channels().size()) {
        abort();
      }
      if (keep) whole.Append(chunk);
    }
  } catch (const InputError& e) {
    if (std::strlen(e.what()) == 0) abort();
  }
  if (whole.rows() > 0) RoundTrip(whole);
  return 0;
}
