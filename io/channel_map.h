#pragma once
// Channel naming shared by the CSV and frames readers: --map renaming and
// the required-channel check. Errors are std::invalid_argument with a
// message for the user; the reader adds the file and place (InputError).

#include <map>
#include <string>
#include <vector>

#include "io/table.h"

namespace fluxtrim::io {

// Applies ReadOptions::rename (canonical name -> file column, matched
// case-insensitively) to the names of a file, all at once, so that swaps
// (--map bx=by --map by=bx) work. A column that is not mapped but already
// carries a mapped-to name steps aside as <name>_orig (so --map f=mag2
// works on a file that also has an `f`). Throws std::invalid_argument when
// a mapped column does not exist or is mapped twice.
std::vector<std::string> MapChannelNames(
    const std::vector<std::string>& names,
    const std::map<std::string, std::string>& rename);

// Throws std::invalid_argument naming the first missing channel of
// {"time"} + required and listing the channels present.
void CheckRequiredChannels(const std::vector<ChannelInfo>& channels,
                           const std::vector<std::string>& required);

// "time, bx, by".
std::string JoinChannelNames(const std::vector<ChannelInfo>& channels);

}  // namespace fluxtrim::io
