#include "io/table.h"

#include <cmath>
#include <limits>
#include <stdexcept>

namespace fluxtrim::io {

bool EqualsIgnoreCase(std::string_view a, std::string_view b) {
  if (a.size() != b.size()) return false;
  for (std::size_t i = 0; i < a.size(); ++i) {
    char x = a[i], y = b[i];
    if (x >= 'A' && x <= 'Z') x = static_cast<char>(x - 'A' + 'a');
    if (y >= 'A' && y <= 'Z') y = static_cast<char>(y - 'A' + 'a');
    if (x != y) return false;
  }
  return true;
}

Table::Table(const std::vector<ChannelInfo>& schema) {
  for (const ChannelInfo& info : schema) AddChannel(info);
}

std::size_t Table::rows() const {
  return channels_.empty() ? 0 : channels_.front().values.size();
}

Channel& Table::AddChannel(const ChannelInfo& info) {
  if (Find(info.name) >= 0) {
    throw std::invalid_argument("channel '" + info.name +
                                "' is present twice");
  }
  Channel channel;
  channel.info = info;
  channel.values.assign(rows(), std::numeric_limits<double>::quiet_NaN());
  channels_.push_back(std::move(channel));
  return channels_.back();
}

int Table::Find(std::string_view name) const {
  for (std::size_t i = 0; i < channels_.size(); ++i) {
    if (EqualsIgnoreCase(channels_[i].info.name, name)) {
      return static_cast<int>(i);
    }
  }
  return -1;
}

const std::vector<double>& Table::Column(std::string_view name) const {
  const int i = Find(name);
  if (i < 0) {
    throw std::out_of_range("channel '" + std::string(name) +
                            "' is not in the recording");
  }
  return channels_[static_cast<std::size_t>(i)].values;
}

std::vector<double>& Table::Column(std::string_view name) {
  return const_cast<std::vector<double>&>(
      static_cast<const Table&>(*this).Column(name));
}

std::vector<ChannelInfo> Table::Schema() const {
  std::vector<ChannelInfo> schema;
  schema.reserve(channels_.size());
  for (const Channel& c : channels_) schema.push_back(c.info);
  return schema;
}

void Table::ClearRows() {
  for (Channel& c : channels_) c.values.clear();
}

void Table::ResetRows(const std::vector<ChannelInfo>& schema) {
  bool same = channels_.size() == schema.size();
  for (std::size_t c = 0; same && c < schema.size(); ++c) {
    same = channels_[c].info.name == schema[c].name;
  }
  if (same) {
    ClearRows();
  } else {
    *this = Table(schema);
  }
}

void Table::Append(const Table& other) {
  if (other.cols() != cols()) {
    throw std::invalid_argument("cannot append tables of different schemas");
  }
  for (std::size_t i = 0; i < channels_.size(); ++i) {
    if (!EqualsIgnoreCase(channels_[i].info.name,
                          other.channels_[i].info.name)) {
      throw std::invalid_argument("cannot append tables of different schemas");
    }
  }
  for (std::size_t i = 0; i < channels_.size(); ++i) {
    const auto& src = other.channels_[i].values;
    channels_[i].values.insert(channels_[i].values.end(), src.begin(),
                               src.end());
  }
}

void Table::Slice(std::size_t begin, std::size_t end) {
  for (Channel& c : channels_) {
    const std::size_t e = std::min(end, c.values.size());
    const std::size_t b = std::min(begin, e);
    c.values.erase(c.values.begin() + static_cast<std::ptrdiff_t>(e),
                   c.values.end());
    c.values.erase(c.values.begin(),
                   c.values.begin() + static_cast<std::ptrdiff_t>(b));
  }
}

}  // namespace fluxtrim::io
