#pragma once
// In-memory columnar table of named channels. Every channel holds doubles
// (NaN marks a missing value); names compare case-insensitively. A Table is
// either a whole recording or one chunk of it (see recording.h).

#include <cstddef>
#include <string>
#include <string_view>
#include <vector>

namespace fluxtrim::io {

struct ChannelInfo {
  std::string name;       // canonical name as used by fluxtrim ("bx")
  std::string unit;       // "nT", "s", "deg", ... ; empty when unknown
  std::string long_name;  // free text (GDF2 NAME=, CSV: empty)
};

struct Channel {
  ChannelInfo info;
  std::vector<double> values;
};

// ASCII case-insensitive comparison used for every channel look-up.
bool EqualsIgnoreCase(std::string_view a, std::string_view b);

class Table {
 public:
  Table() = default;
  explicit Table(const std::vector<ChannelInfo>& schema);

  std::size_t rows() const;
  std::size_t cols() const { return channels_.size(); }

  // Adds an empty-or-NaN-filled channel (rows() long). Throws
  // std::invalid_argument when the name is already present.
  Channel& AddChannel(const ChannelInfo& info);

  // Index of the channel, or -1. Case-insensitive.
  int Find(std::string_view name) const;
  bool Has(std::string_view name) const { return Find(name) >= 0; }

  // Throws std::out_of_range naming the channel when it is missing.
  const std::vector<double>& Column(std::string_view name) const;
  std::vector<double>& Column(std::string_view name);

  const Channel& channel(std::size_t i) const { return channels_[i]; }
  Channel& channel(std::size_t i) { return channels_[i]; }
  const std::vector<Channel>& channels() const { return channels_; }

  std::vector<ChannelInfo> Schema() const;

  // Removes all rows, keeps the channels.
  void ClearRows();
  // Removes all rows and makes the channels `schema` (keeping the columns'
  // buffers when the names already match): readers reuse one chunk table.
  void ResetRows(const std::vector<ChannelInfo>& schema);
  // Appends the rows of another table with the same schema (same names in
  // the same order); throws std::invalid_argument otherwise.
  void Append(const Table& other);
  // Keeps rows [begin, end).
  void Slice(std::size_t begin, std::size_t end);

  const std::string& time_channel() const { return time_channel_; }
  void set_time_channel(std::string name) { time_channel_ = std::move(name); }

 private:
  std::vector<Channel> channels_;
  std::string time_channel_ = "time";
};

}  // namespace fluxtrim::io
