#include "io/memory_recording.h"

#include <algorithm>

namespace fluxtrim::io {

TableReader::TableReader(const Table& table, std::string name)
    : table_(table), name_(std::move(name)), schema_(table.Schema()) {}

std::size_t TableReader::ReadChunk(Table* chunk, std::size_t max_rows) {
  if (chunk->cols() != schema_.size()) *chunk = Table(schema_);
  const std::size_t n = std::min(max_rows, table_.rows() - next_);
  for (std::size_t c = 0; c < schema_.size(); ++c) {
    const auto& src = table_.channel(c).values;
    auto& dst = chunk->channel(c).values;
    dst.assign(src.begin() + static_cast<std::ptrdiff_t>(next_),
               src.begin() + static_cast<std::ptrdiff_t>(next_ + n));
  }
  next_ += n;
  return n;
}

}  // namespace fluxtrim::io
