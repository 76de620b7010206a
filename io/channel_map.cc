#include "io/channel_map.h"

#include <algorithm>
#include <stdexcept>

namespace fluxtrim::io {

std::vector<std::string> MapChannelNames(
    const std::vector<std::string>& names,
    const std::map<std::string, std::string>& rename) {
  std::vector<std::string> out = names;
  std::vector<bool> mapped(names.size(), false);
  for (const auto& [canonical, column] : rename) {
    std::size_t j = 0;
    while (j < names.size() && !EqualsIgnoreCase(names[j], column)) ++j;
    if (j == names.size()) {
      std::string have;
      for (const std::string& n : names) have += (have.empty() ? "" : ", ") + n;
      throw std::invalid_argument("--map " + canonical + "=" + column +
                                  ": there is no column '" + column +
                                  "'; the file has: " + have);
    }
    if (mapped[j]) {
      throw std::invalid_argument("--map: column '" + column +
                                  "' is mapped to two channels");
    }
    mapped[j] = true;
    out[j] = canonical;
  }
  auto taken = [&](const std::string& n) {
    return std::any_of(out.begin(), out.end(), [&](const std::string& o) {
      return EqualsIgnoreCase(o, n);
    });
  };
  for (std::size_t j = 0; j < names.size(); ++j) {
    if (mapped[j]) continue;
    bool clash = false;
    for (std::size_t k = 0; k < names.size(); ++k) {
      clash = clash || (mapped[k] && EqualsIgnoreCase(out[k], out[j]));
    }
    if (!clash) continue;
    const std::string base = out[j] + "_orig";
    std::string renamed = base;
    for (int i = 2; taken(renamed); ++i) renamed = base + std::to_string(i);
    out[j] = renamed;
  }
  return out;
}

void CheckRequiredChannels(const std::vector<ChannelInfo>& channels,
                           const std::vector<std::string>& required) {
  std::vector<std::string> all = {"time"};
  all.insert(all.end(), required.begin(), required.end());
  for (const std::string& want : all) {
    const bool present =
        std::any_of(channels.begin(), channels.end(),
                    [&](const ChannelInfo& c) {
                      return EqualsIgnoreCase(c.name, want);
                    });
    if (!present) {
      throw std::invalid_argument(
          "missing channel '" + want + "' (required); the file has: " +
          JoinChannelNames(channels) + " (--map " + want +
          "=COLUMN reads another column as " + want + ")");
    }
  }
}

std::string JoinChannelNames(const std::vector<ChannelInfo>& channels) {
  std::string out;
  for (const ChannelInfo& c : channels) {
    if (!out.empty()) out += ", ";
    out += c.name;
  }
  return out;
}

}  // namespace fluxtrim::io
