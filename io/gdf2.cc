#include "io/gdf2.h"

#include <algorithm>
#include <cmath>
#include <fstream>
#include <limits>
#include <stdexcept>
#include <string_view>
#include <unordered_map>
#include <unordered_set>
#include <utility>

#include "io/channel_map.h"
#include "io/error.h"
#include "io/fortran_format.h"

namespace fluxtrim::io {
namespace {

// Bounds that keep memory and time finite on corrupt input; far above real
// survey files (a 1024-channel spectrum plus a few hundred channels, records
// of a few kB). The channel bound also caps Table's name look-ups, which are
// linear per channel.
constexpr std::size_t kMaxChannels = 2048;
constexpr std::size_t kMaxRecordWidth = 1u << 22;  // characters
constexpr std::size_t kMaxDfnLine = 1u << 20;      // characters
// A .dat line may carry this much trailing blank space past the record.
constexpr std::size_t kDatLineSlack = 4096;

constexpr int kWriteWidth = 25;     // E25.16: 24 characters + one blank
constexpr int kWriteDecimals = 16;  // room for 17 significant digits
constexpr int kCommentWidth = 76;   // COMMENTS:A76, the conventional layout

bool IsBlank(char c) { return c == ' ' || c == '\t'; }

std::string_view Trim(std::string_view s) {
  std::size_t b = 0, e = s.size();
  while (b < e && IsBlank(s[b])) ++b;
  while (e > b && IsBlank(s[e - 1])) --e;
  return s.substr(b, e - b);
}

std::string Lower(std::string_view s) {
  std::string out(s);
  for (char& c : out) {
    if (c >= 'A' && c <= 'Z') c = static_cast<char>(c - 'A' + 'a');
  }
  return out;
}

bool StartsWithIgnoreCase(std::string_view s, std::string_view prefix) {
  return s.size() >= prefix.size() &&
         EqualsIgnoreCase(s.substr(0, prefix.size()), prefix);
}

// A piece of a line with the 0-based offset of its first character.
struct Piece {
  std::string_view text;
  std::size_t offset = 0;
};

// Splits on any character of seps; pieces are trimmed, offsets kept.
std::vector<Piece> Split(Piece whole, std::string_view seps) {
  std::vector<Piece> out;
  std::size_t start = 0;
  const std::string_view s = whole.text;
  for (std::size_t i = 0; i <= s.size(); ++i) {
    if (i == s.size() || seps.find(s[i]) != std::string_view::npos) {
      std::string_view raw = s.substr(start, i - start);
      std::size_t lead = 0;
      while (lead < raw.size() && IsBlank(raw[lead])) ++lead;
      out.push_back({Trim(raw), whole.offset + start + lead});
      start = i + 1;
    }
  }
  return out;
}

// Reads one line (without '\n' and a trailing '\r') of at most max_len
// characters. Returns false at the end of input with nothing read; sets
// *too_long (and stops reading) when the line is longer.
bool ReadLine(std::istream& in, std::string* line, std::size_t max_len,
              bool* too_long) {
  line->clear();
  *too_long = false;
  std::streambuf* sb = in.rdbuf();
  if (sb == nullptr) return false;
  bool any = false;
  for (;;) {
    const int c = sb->sbumpc();
    if (c == std::char_traits<char>::eof()) break;
    any = true;
    if (c == '\n') break;
    if (line->size() >= max_len) {
      *too_long = true;
      return true;
    }
    line->push_back(static_cast<char>(c));
  }
  if (!line->empty() && line->back() == '\r') line->pop_back();
  return any;
}

std::string Quote(std::string_view s) {
  std::string out = "'";
  for (char c : s.substr(0, 60)) {
    out += (static_cast<unsigned char>(c) < 0x20 || c == 0x7f) ? '?' : c;
  }
  if (s.size() > 60) out += "...";
  return out + "'";
}

std::string ListNames(const std::vector<ChannelInfo>& channels) {
  std::string out;
  const std::size_t shown = std::min<std::size_t>(channels.size(), 30);
  for (std::size_t i = 0; i < shown; ++i) {
    if (i > 0) out += ", ";
    out += channels[i].name;
  }
  if (channels.size() > shown) {
    out += ", ... (" + std::to_string(channels.size()) + " in all)";
  }
  return out.empty() ? "(none)" : out;
}

// ---------------------------------------------------------------------------
// .dfn

struct ParsedField {
  Gdf2Field field;
  std::size_t format_offset = 0;  // for error columns
};

class DfnParser {
 public:
  explicit DfnParser(std::string name) : name_(std::move(name)) {}

  Gdf2Definition Parse(std::istream& in) {
    std::string line;
    bool too_long = false;
    while (!ended_ && ReadLine(in, &line, kMaxDfnLine, &too_long)) {
      ++line_no_;
      if (too_long) {
        throw InputError(name_, line_no_, kMaxDfnLine + 1,
                         "definition line longer than " +
                             std::to_string(kMaxDfnLine) +
                             " characters: expected one DEFN line");
      }
      ParseLine(line);
    }
    if (in.bad()) throw InputError(name_, 0, 0, "read error");
    if (def_.fields.empty()) {
      throw InputError(name_, line_no_ > 0 ? line_no_ : 0, 0,
                       "no data record definition: expected a line such as "
                       "'DEFN 1 ST=RECD,RT=;TIME:F12.2:UNIT=s' (a definition "
                       "with an empty RT=)");
    }
    std::size_t column = 0;
    for (Gdf2Field& f : def_.fields) {
      f.column = column;
      column += static_cast<std::size_t>(f.width) *
                static_cast<std::size_t>(f.repeat);
      if (column > kMaxRecordWidth) {
        throw InputError(name_, f.dfn_line, 0,
                         "field " + f.name + ": data record wider than " +
                             std::to_string(kMaxRecordWidth) + " characters");
      }
    }
    def_.record_width = column;
    def_.has_record_type = EqualsIgnoreCase(def_.fields.front().name, "RT") &&
                           def_.fields.front().kind == 'A';
    return def_;
  }

 private:
  void ParseLine(const std::string& raw) {
    std::string_view line = raw;
    // DOS end-of-file marker and blank lines carry nothing.
    if (Trim(line).empty() || Trim(line) == "\x1a") return;
    std::size_t pos = 0;
    while (pos < line.size() && IsBlank(line[pos])) ++pos;
    if (!StartsWithIgnoreCase(line.substr(pos), "DEFN")) {
      throw InputError(name_, line_no_, pos + 1,
                       "expected a definition line starting with DEFN, got " +
                           Quote(Trim(line)));
    }
    pos += 4;
    const std::size_t semi = line.find(';', pos);
    const std::string_view head =
        line.substr(pos, semi == std::string_view::npos ? line.size() - pos
                                                        : semi - pos);
    const std::string record_type = ParseHead({head, pos});
    if (semi == std::string_view::npos) return;  // header only: no fields
    for (const Piece& spec :
         Split({line.substr(semi + 1), semi + 1}, ";")) {
      if (spec.text.empty()) continue;
      if (IsEndDefn(spec.text)) {
        ended_ = true;
        return;
      }
      ParsedField f = ParseField(spec);
      if (record_type.empty()) {
        AddDataField(std::move(f));
      } else {
        bool known = false;
        for (const std::string& t : def_.other_record_types) {
          known = known || EqualsIgnoreCase(t, record_type);
        }
        if (!known) def_.other_record_types.push_back(record_type);
      }
    }
  }

  static bool IsEndDefn(std::string_view text) {
    // "END DEFN", also with several blanks or none between the words.
    if (!StartsWithIgnoreCase(text, "END")) return false;
    return EqualsIgnoreCase(Trim(text.substr(3)), "DEFN");
  }

  // "[n] ST=RECD,RT=COMM" -> record type ("" for data records).
  std::string ParseHead(Piece head) {
    std::size_t i = 0;
    const std::string_view s = head.text;
    while (i < s.size() && IsBlank(s[i])) ++i;
    while (i < s.size() && s[i] >= '0' && s[i] <= '9') ++i;
    std::string record_type;
    for (const Piece& kv : Split({s.substr(i), head.offset + i}, ",")) {
      if (kv.text.empty()) continue;
      const std::size_t eq = kv.text.find('=');
      if (eq == std::string_view::npos) {
        throw InputError(name_, line_no_, kv.offset + 1,
                         "expected KEY=VALUE such as ST=RECD or RT=, got " +
                             Quote(kv.text));
      }
      const std::string_view key = Trim(kv.text.substr(0, eq));
      const std::string_view value = Trim(kv.text.substr(eq + 1));
      if (EqualsIgnoreCase(key, "ST")) {
        if (!EqualsIgnoreCase(value, "RECD") &&
            !EqualsIgnoreCase(value, "RECORD")) {
          throw InputError(name_, line_no_, kv.offset + 1,
                           "expected ST=RECD (or ST=RECORD), got " +
                               Quote(kv.text));
        }
      } else if (EqualsIgnoreCase(key, "RT")) {
        record_type = std::string(value);
      }
      // Other keys are not in the standard's header; ignored.
    }
    return record_type;
  }

  ParsedField ParseField(Piece spec) {
    ParsedField pf;
    Gdf2Field& f = pf.field;
    f.dfn_line = line_no_;
    const std::vector<Piece> parts = Split(spec, ":");
    f.name = std::string(parts[0].text);
    if (f.name.empty()) {
      throw InputError(name_, line_no_, spec.offset + 1,
                       "expected NAME:FORMAT, the field name is empty");
    }
    if (parts.size() < 2 || parts[1].text.empty()) {
      throw InputError(name_, line_no_, spec.offset + 1,
                       "field " + f.name + ": expected NAME:FORMAT such as " +
                           f.name + ":F10.3, got " + Quote(spec.text));
    }
    // Attributes: the rest of the format piece after ',' and every further
    // ':' piece, each split on ','.
    std::vector<Piece> attrs = Split(parts[1], ",");
    const Piece format = attrs.front();
    attrs.erase(attrs.begin());
    for (std::size_t k = 2; k < parts.size(); ++k) {
      for (const Piece& a : Split(parts[k], ",")) attrs.push_back(a);
    }
    EditDescriptor d;
    std::string why;
    if (!ParseEditDescriptor(format.text, &d, &why)) {
      throw InputError(name_, line_no_, format.offset + 1,
                       "field " + f.name + ": format " + Quote(format.text) +
                           ": " + why);
    }
    f.kind = d.kind;
    f.repeat = d.repeat;
    f.width = d.width;
    f.decimals = d.decimals;
    pf.format_offset = format.offset;
    for (const Piece& a : attrs) {
      if (a.text.empty()) continue;
      const std::size_t eq = a.text.find('=');
      const std::string_view key =
          eq == std::string_view::npos ? std::string_view()
                                       : Trim(a.text.substr(0, eq));
      const std::string_view value =
          eq == std::string_view::npos ? std::string_view()
                                       : Trim(a.text.substr(eq + 1));
      if (EqualsIgnoreCase(key, "UNIT") || EqualsIgnoreCase(key, "UNITS")) {
        f.unit = std::string(value);
      } else if (EqualsIgnoreCase(key, "NULL")) {
        f.null_text = std::string(value);
      } else if (EqualsIgnoreCase(key, "NAME")) {
        f.long_name = std::string(value);
      } else {
        if (!f.comment.empty()) f.comment += "; ";
        f.comment += std::string(a.text);
      }
    }
    return pf;
  }

  void AddDataField(ParsedField pf) {
    Gdf2Field& f = pf.field;
    // Channel names this field creates, checked against all before.
    std::size_t added = f.kind == 'A' ? 0 : static_cast<std::size_t>(f.repeat);
    if (channel_count_ + added > kMaxChannels) {
      throw InputError(name_, line_no_, pf.format_offset + 1,
                       "field " + f.name + ": more than " +
                           std::to_string(kMaxChannels) +
                           " numeric channels in the data record");
    }
    channel_count_ += added;
    auto claim = [&](const std::string& n) {
      if (!names_.insert(Lower(n)).second) {
        throw InputError(name_, line_no_, 0,
                         "field " + f.name + ": name " + Quote(n) +
                             " is defined twice in the data record");
      }
    };
    claim(f.name);
    if (f.repeat > 1) {
      for (int k = 0; k < f.repeat; ++k) {
        claim(f.name + "_" + std::to_string(k));
      }
    }
    def_.fields.push_back(std::move(f));
  }

  std::string name_;
  std::size_t line_no_ = 0;
  bool ended_ = false;
  std::size_t channel_count_ = 0;
  std::unordered_set<std::string> names_;
  Gdf2Definition def_;
};

// ---------------------------------------------------------------------------
// Paths

std::string Extension(const std::string& path, std::size_t* dot) {
  const std::size_t slash = path.find_last_of('/');
  const std::size_t d = path.find_last_of('.');
  if (d == std::string::npos || (slash != std::string::npos && d < slash)) {
    *dot = path.size();
    return "";
  }
  *dot = d;
  return path.substr(d + 1);
}

bool IsUpperExtension(const std::string& ext) {
  return !ext.empty() && ext[0] >= 'A' && ext[0] <= 'Z';
}

bool FileExists(const std::string& path) {
  std::ifstream f(path, std::ios::binary);
  return f.good();
}

}  // namespace

// ---------------------------------------------------------------------------
// Reader

struct Gdf2Reader::Impl {
  // Where each channel's elements sit in a data line.
  struct Slot {
    std::size_t column = 0;  // 0-based
    int width = 0;
    const Gdf2Field* field = nullptr;
    std::string element;  // channel name in the file (NAME or NAME_k)
    bool has_null_value = false;
    double null_value = 0.0;
    bool null_is_fill = false;  // NULL=*** : '*' fill is the null
  };

  std::unique_ptr<std::istream> owned_dfn;
  std::unique_ptr<std::istream> owned_dat;
  std::istream* dat = nullptr;
  std::string dfn_name;
  std::string dat_name;
  std::string path;
  ReadOptions options;
  Gdf2Definition def;
  std::vector<ChannelInfo> channels;
  std::vector<Slot> slots;  // one per channel, same order
  std::vector<std::string> skipped_text;
  int time_index = -1;

  std::size_t line_no = 0;
  std::size_t rows_read = 0;
  std::size_t skipped_lines = 0;
  bool have_last_time = false;
  double last_time = 0.0;
  std::size_t last_time_line = 0;
  bool at_end = false;
  std::exception_ptr pending;
  std::string line;
  std::vector<double> row;

  void Setup(std::istream& dfn) {
    def = ParseGdf2Definition(dfn, dfn_name);
    for (const Gdf2Field& f : def.fields) {
      if (f.kind == 'A') {
        const bool is_rt = def.has_record_type && &f == &def.fields.front();
        if (!is_rt) skipped_text.push_back(f.name);
        continue;
      }
      Slot base;
      base.field = &f;
      base.width = f.width;
      if (!f.null_text.empty()) {
        double v = 0.0;
        if (f.null_text.find_first_not_of('*') == std::string::npos) {
          base.null_is_fill = true;
        } else if (ParseFortranNumber(f.null_text, &v) == NumberStatus::kOk) {
          base.has_null_value = true;
          base.null_value = v;
        }
      }
      for (int k = 0; k < f.repeat; ++k) {
        Slot s = base;
        s.column = f.column + static_cast<std::size_t>(k) *
                                  static_cast<std::size_t>(f.width);
        s.element = f.repeat > 1 ? f.name + "_" + std::to_string(k) : f.name;
        ChannelInfo info;
        info.name = s.element;
        info.unit = f.unit;
        info.long_name = f.long_name;
        channels.push_back(info);
        slots.push_back(std::move(s));
      }
    }
    ApplyRename();
    CheckRequired();
    row.resize(channels.size());
  }

  // The same --map rules as every other format (io/channel_map.h): swaps
  // work, an unmapped field that carries a mapped-to name steps aside as
  // <name>_orig.
  void ApplyRename() {
    for (const auto& [canonical, column] : options.rename) {
      for (const std::string& t : skipped_text) {
        if (EqualsIgnoreCase(t, column)) {
          throw InputError(dfn_name, "--map " + canonical + "=" + column,
                           "field " + column +
                               " is text (A format) and cannot be read as a "
                               "channel");
        }
      }
    }
    if (options.rename.empty()) {
      // Names in the .dfn are unique already (checked by DfnParser).
      return;
    }
    std::vector<std::string> names;
    names.reserve(channels.size());
    for (const ChannelInfo& c : channels) names.push_back(c.name);
    try {
      names = MapChannelNames(names, options.rename);
    } catch (const std::invalid_argument& e) {
      throw InputError(dfn_name, "data record definition", e.what());
    }
    std::unordered_set<std::string> seen;
    for (std::size_t i = 0; i < channels.size(); ++i) {
      channels[i].name = names[i];
      if (!seen.insert(Lower(names[i])).second) {
        throw InputError(dfn_name, "--map",
                         "two channels are named " + Quote(names[i]) +
                             " after renaming; map each name once");
      }
    }
  }

  void CheckRequired() {
    std::vector<std::string> required = {"time"};
    for (const std::string& r : options.required) required.push_back(r);
    for (const std::string& r : required) {
      int found = -1;
      for (std::size_t i = 0; i < channels.size(); ++i) {
        if (EqualsIgnoreCase(channels[i].name, r)) found = static_cast<int>(i);
      }
      if (found < 0) {
        throw InputError(dfn_name, "data record definition",
                         "missing channel '" + r +
                             "' (required); the file has: " +
                             ListNames(channels) + " (--map " + r +
                             "=FIELD reads another field as " + r + ")");
      }
      if (EqualsIgnoreCase(r, "time")) time_index = found;
    }
  }

  [[noreturn]] void Fail(std::size_t column0, const std::string& msg) const {
    throw InputError(dat_name, line_no, column0 + 1, msg);
  }

  std::string Describe(const Slot& s) const {
    std::string d = "field " + s.element;
    if (!EqualsIgnoreCase(s.element, channels[&s - slots.data()].name)) {
      d += " (channel " + channels[&s - slots.data()].name + ")";
    }
    return d;
  }

  // Returns false for lines that hold no data record.
  bool ParseRecord(std::string_view text) {
    if (Trim(text).empty() || Trim(text) == "\x1a") return false;
    if (def.has_record_type) {
      const std::string_view rt = Trim(text.substr(0, 4));
      if (EqualsIgnoreCase(rt, "COMM")) return false;
      for (const std::string& t : def.other_record_types) {
        if (EqualsIgnoreCase(rt, t)) return false;
      }
      if (!rt.empty() && !EqualsIgnoreCase(rt, "DATA")) {
        Fail(0, "record type " + Quote(rt) +
                    ": expected DATA, COMM or a record type the .dfn "
                    "defines");
      }
    } else if (StartsWithIgnoreCase(text, "COMM")) {
      return false;
    }
    if (text.size() < def.record_width) {
      // A cut text field at the end costs nothing; a cut number does.
      for (const Gdf2Field& f : def.fields) {
        const std::size_t end =
            f.column + static_cast<std::size_t>(f.width) *
                           static_cast<std::size_t>(f.repeat);
        if (end > text.size() && f.kind != 'A') {
          std::size_t cut = f.column;
          std::string element = f.name;
          if (f.repeat > 1) {
            const std::size_t k =
                text.size() > f.column
                    ? (text.size() - f.column) /
                          static_cast<std::size_t>(f.width)
                    : 0;
            cut += k * static_cast<std::size_t>(f.width);
            element = f.name + "_" + std::to_string(k);
          }
          Fail(std::min(cut, text.size()),
               "line is " + std::to_string(text.size()) +
                   " characters long: field " + element + " (columns " +
                   std::to_string(cut + 1) + "-" +
                   std::to_string(cut + static_cast<std::size_t>(f.width)) +
                   ") is cut; the .dfn defines " +
                   std::to_string(def.record_width) + "-character records");
        }
      }
    } else if (text.size() > def.record_width) {
      const std::string_view rest = text.substr(def.record_width);
      const std::size_t bad = rest.find_first_not_of(" \t");
      if (bad != std::string_view::npos) {
        Fail(def.record_width + bad,
             "unexpected text " + Quote(Trim(rest)) +
                 " after the last field: the .dfn defines " +
                 std::to_string(def.record_width) +
                 "-character records (check the widths in the .dfn)");
      }
    }
    for (std::size_t i = 0; i < slots.size(); ++i) {
      row[i] = ParseValue(slots[i], text);
    }
    if (time_index >= 0) CheckTime(slots[static_cast<std::size_t>(time_index)]);
    return true;
  }

  double ParseValue(const Slot& s, std::string_view text) const {
    constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
    const std::string_view raw = text.substr(s.column, s.width);
    const std::string_view t = Trim(raw);
    if (!s.field->null_text.empty() &&
        EqualsIgnoreCase(t, s.field->null_text)) {
      return kNaN;
    }
    double v = 0.0;
    switch (ParseFortranNumber(raw, &v)) {
      case NumberStatus::kOk:
        if (s.has_null_value && v == s.null_value) return kNaN;
        return v;
      case NumberStatus::kBlank:
        return kNaN;
      case NumberStatus::kOverflowFill:
        if (s.null_is_fill) return kNaN;
        if (options.non_finite == NonFinitePolicy::kGap) return kNaN;
        Fail(s.column, Describe(s) + ": " + Quote(t) +
                           " is Fortran's overflow fill, not a number "
                           "(format " +
                           FormatEditDescriptor(Descriptor(*s.field)) +
                           "); non-finite values are rejected unless the "
                           "gap policy is chosen");
      case NumberStatus::kNonFinite:
        if (options.non_finite == NonFinitePolicy::kGap) return kNaN;
        Fail(s.column, Describe(s) + ": " + Quote(t) +
                           " is not a finite number; non-finite values are "
                           "rejected unless the gap policy is chosen (then "
                           "they read as gaps)");
      case NumberStatus::kOutOfRange:
        Fail(s.column, Describe(s) + ": " + Quote(t) +
                           " is beyond the range of a double");
      case NumberStatus::kInvalid:
        break;
    }
    Fail(s.column, Describe(s) + ": expected a number (format " +
                       FormatEditDescriptor(Descriptor(*s.field)) +
                       ", columns " + std::to_string(s.column + 1) + "-" +
                       std::to_string(s.column + s.width) + "), got " +
                       Quote(t));
  }

  static EditDescriptor Descriptor(const Gdf2Field& f) {
    EditDescriptor d;
    d.repeat = f.repeat;
    d.kind = f.kind;
    d.written = f.kind;
    d.width = f.width;
    d.decimals = f.decimals;
    return d;
  }

  void CheckTime(const Slot& s) {
    const double t = row[static_cast<std::size_t>(time_index)];
    if (std::isnan(t)) {
      Fail(s.column, Describe(s) +
                         ": the time is missing (null or blank); every "
                         "record needs a time");
    }
    if (have_last_time && !(t > last_time) &&
        options.time_order == TimeOrderPolicy::kReject) {
      char buf[160];
      std::snprintf(buf, sizeof(buf), "time %.17g %s the time %.17g of line %zu",
                    t, t == last_time ? "repeats" : "goes back before",
                    last_time, last_time_line);
      Fail(s.column, Describe(s) + ": " + buf +
                         "; times must increase (accepting them is an "
                         "option)");
    }
    have_last_time = true;
    last_time = t;
    last_time_line = line_no;
  }

  std::size_t ReadChunk(Table* chunk, std::size_t max_rows) {
    PrepareChunk(chunk);
    if (pending) std::rethrow_exception(pending);
    std::size_t rows = 0;
    if (at_end) return 0;
    const std::size_t max_len = def.record_width + kDatLineSlack;
    while (rows < max_rows) {
      try {
        bool too_long = false;
        if (!ReadLine(*dat, &line, max_len, &too_long)) {
          if (dat->bad()) throw InputError(dat_name, line_no, 0, "read error");
          at_end = true;
          if (rows_read == 0) {
            throw InputError(dat_name, line_no, 0,
                             line_no == 0
                                 ? "the .dat file is empty: expected data "
                                   "records"
                                 : "no data records (only comments or blank "
                                   "lines)");
          }
          break;
        }
        ++line_no;
        if (too_long) {
          Fail(max_len, "line longer than " + std::to_string(max_len) +
                            " characters: the .dfn defines " +
                            std::to_string(def.record_width) +
                            "-character records");
        }
        if (!ParseRecord(line)) {
          ++skipped_lines;
          continue;
        }
      } catch (const InputError&) {
        pending = std::current_exception();
        if (rows > 0) return rows;
        throw;
      }
      for (std::size_t i = 0; i < row.size(); ++i) {
        chunk->channel(i).values.push_back(row[i]);
      }
      ++rows;
      ++rows_read;
    }
    return rows;
  }

  void PrepareChunk(Table* chunk) const {
    chunk->ResetRows(channels);
    if (time_index >= 0) {
      chunk->set_time_channel(
          channels[static_cast<std::size_t>(time_index)].name);
    }
  }
};

Gdf2Definition ParseGdf2Definition(std::istream& dfn,
                                   const std::string& dfn_name) {
  return DfnParser(dfn_name).Parse(dfn);
}

Gdf2Reader::Gdf2Reader(std::istream& dfn, const std::string& dfn_name,
                       std::istream& dat, const std::string& dat_name,
                       const ReadOptions& options)
    : impl_(std::make_unique<Impl>()) {
  impl_->dfn_name = dfn_name;
  impl_->dat_name = dat_name;
  impl_->path = dat_name;
  impl_->options = options;
  impl_->dat = &dat;
  impl_->Setup(dfn);
}

Gdf2Reader::Gdf2Reader(const std::string& dfn_path, const std::string& dat_path,
                       const ReadOptions& options)
    : impl_(std::make_unique<Impl>()) {
  impl_->dfn_name = dfn_path;
  impl_->dat_name = dat_path;
  impl_->path = dat_path;
  impl_->options = options;
  auto dfn = std::make_unique<std::ifstream>(dfn_path, std::ios::binary);
  if (!dfn->is_open()) {
    throw InputError(dfn_path, 0, 0, "cannot open the ASEG-GDF2 .dfn file");
  }
  auto dat = std::make_unique<std::ifstream>(dat_path, std::ios::binary);
  if (!dat->is_open()) {
    throw InputError(dat_path, 0, 0, "cannot open the ASEG-GDF2 .dat file");
  }
  impl_->owned_dat = std::move(dat);
  impl_->dat = impl_->owned_dat.get();
  impl_->Setup(*dfn);
}

Gdf2Reader::~Gdf2Reader() = default;

const std::vector<ChannelInfo>& Gdf2Reader::channels() const {
  return impl_->channels;
}

std::size_t Gdf2Reader::ReadChunk(Table* chunk, std::size_t max_rows) {
  return impl_->ReadChunk(chunk, max_rows);
}

const std::string& Gdf2Reader::path() const { return impl_->path; }

const Gdf2Definition& Gdf2Reader::definition() const { return impl_->def; }

const std::vector<std::string>& Gdf2Reader::skipped_text_fields() const {
  return impl_->skipped_text;
}

std::size_t Gdf2Reader::skipped_lines() const { return impl_->skipped_lines; }

std::unique_ptr<RecordingReader> OpenGdf2Reader(const std::string& path,
                                                const ReadOptions& options) {
  std::size_t dot = 0;
  const std::string ext = Extension(path, &dot);
  const bool given_dfn = EqualsIgnoreCase(ext, "dfn");
  if (!given_dfn && !EqualsIgnoreCase(ext, "dat")) {
    throw InputError(path, 0, 0,
                     "expected an ASEG-GDF2 path ending in .dfn or .dat");
  }
  if (!FileExists(path)) {
    throw InputError(path, 0, 0,
                     std::string("cannot open the ASEG-GDF2 ") +
                         (given_dfn ? ".dfn" : ".dat") + " file");
  }
  const std::string stem = path.substr(0, dot);
  const std::string lower = given_dfn ? ".dat" : ".dfn";
  const std::string upper = given_dfn ? ".DAT" : ".DFN";
  const std::string first = stem + (IsUpperExtension(ext) ? upper : lower);
  const std::string second = stem + (IsUpperExtension(ext) ? lower : upper);
  std::string partner;
  if (FileExists(first)) {
    partner = first;
  } else if (FileExists(second)) {
    partner = second;
  } else {
    throw InputError(first, 0, 0,
                     std::string("cannot open the ASEG-GDF2 ") +
                         (given_dfn ? ".dat" : ".dfn") + " that goes with " +
                         path + " (also tried " + second + ")");
  }
  const std::string& dfn = given_dfn ? path : partner;
  const std::string& dat = given_dfn ? partner : path;
  return std::make_unique<Gdf2Reader>(dfn, dat, options);
}

// ---------------------------------------------------------------------------
// Writer

namespace {

// Attribute text cannot hold the separators of the .dfn syntax.
std::string AttributeText(const std::string& s) {
  std::string out;
  for (char c : s) {
    const bool separator = c == ',' || c == ';' || c == ':';
    const bool control = static_cast<unsigned char>(c) < 0x20 || c == 0x7f;
    out += (separator || control) ? ' ' : c;
  }
  return std::string(Trim(out));
}

void CheckName(const std::string& file, const ChannelInfo& info) {
  bool ok = !info.name.empty();
  for (char c : info.name) {
    const bool control = static_cast<unsigned char>(c) <= 0x20 || c == 0x7f;
    ok = ok && !control && c != ',' && c != ';' && c != ':' && c != '=';
  }
  if (!ok) {
    throw InputError(file, "channel " + Quote(info.name),
                     "an ASEG-GDF2 field name must be non-empty and hold no "
                     "blank, control character or any of , ; : =");
  }
}

class Gdf2Writer : public RecordingWriter {
 public:
  // Writes the .dfn at once; rows go to dat.
  Gdf2Writer(std::ostream& dfn, std::ostream& dat, std::string dfn_name,
             std::string dat_name, const std::vector<ChannelInfo>& schema,
             const WriteOptions& options)
      : dat_(&dat),
        dfn_name_(std::move(dfn_name)),
        dat_name_(std::move(dat_name)),
        schema_(schema) {
    std::unordered_set<std::string> seen;
    for (const ChannelInfo& c : schema_) {
      CheckName(dfn_name_, c);
      if (!seen.insert(Lower(c.name)).second) {
        throw InputError(dfn_name_, "channel " + Quote(c.name),
                         "the channel name is given twice");
      }
    }
    // The time channel goes first (the standard's convention: the fiducial
    // leads the record); the others keep their order.
    for (std::size_t i = 0; i < schema_.size(); ++i) {
      if (EqualsIgnoreCase(schema_[i].name, "time")) order_.push_back(i);
    }
    for (std::size_t i = 0; i < schema_.size(); ++i) {
      if (!EqualsIgnoreCase(schema_[i].name, "time")) order_.push_back(i);
    }
    // A channel of its own named RT would clash with the record-type field;
    // then the records go without it (readers tell COMM lines apart by
    // their first four characters either way).
    for (const ChannelInfo& c : schema_) {
      if (EqualsIgnoreCase(c.name, "RT")) record_type_ = false;
    }
    WriteDefinition(dfn);
    WriteComments(options.comment);
    const std::string null_text = kGdf2DefaultNull;
    null_value_ = -1e100;
    double parsed = 0.0;
    if (ParseFortranNumber(null_text, &parsed) == NumberStatus::kOk) {
      null_value_ = parsed;
    }
    null_field_.assign(static_cast<std::size_t>(kWriteWidth) -
                           null_text.size(), ' ');
    null_field_ += null_text;
  }

  ~Gdf2Writer() override {
    try {
      Close();
    } catch (...) {
      // Close() reports failures to callers that call it; a destructor
      // cannot.
    }
  }

  void Write(const Table& chunk) override {
    if (closed_) throw std::logic_error("Write after Close on " + dat_name_);
    bool same = chunk.cols() == schema_.size();
    for (std::size_t i = 0; same && i < schema_.size(); ++i) {
      same = EqualsIgnoreCase(chunk.channel(i).info.name, schema_[i].name);
    }
    if (!same) {
      throw std::invalid_argument(
          "GDF2 writer: the chunk's channels differ from the schema given "
          "at creation");
    }
    const std::size_t rows = chunk.rows();
    // Text goes out every kFlushRows rows: memory stays bounded whatever
    // the chunk size.
    constexpr std::size_t kFlushRows = 4096;
    std::string out;
    out.reserve(std::min(rows, kFlushRows) *
                (4 + order_.size() * kWriteWidth + 1));
    for (std::size_t r = 0; r < rows; ++r) {
      if (r > 0 && r % kFlushRows == 0) {
        dat_->write(out.data(), static_cast<std::streamsize>(out.size()));
        if (!*dat_) throw std::runtime_error(dat_name_ + ": write failed");
        out.clear();
      }
      if (record_type_) out += "DATA";
      for (std::size_t i : order_) {
        const double v = chunk.channel(i).values[r];
        if (std::isnan(v)) {
          out += null_field_;
        } else if (std::isinf(v)) {
          const char* text = v > 0 ? "Inf" : "-Inf";
          out.append(static_cast<std::size_t>(kWriteWidth) -
                         std::char_traits<char>::length(text),
                     ' ');
          out += text;
        } else {
          if (v == null_value_) {
            throw std::runtime_error(
                dat_name_ + ": channel " + schema_[i].name + " row " +
                std::to_string(rows_written_ + r + 1) + ": the value " +
                kGdf2DefaultNull +
                " is the ASEG-GDF2 null value and would read back as a gap");
          }
          FormatRoundTripE(v, kWriteWidth, &out);
        }
      }
      out += '\n';
    }
    dat_->write(out.data(), static_cast<std::streamsize>(out.size()));
    if (!*dat_) throw std::runtime_error(dat_name_ + ": write failed");
    rows_written_ += rows;
  }

  void Close() override {
    if (closed_) return;
    closed_ = true;
    dat_->flush();
    if (!*dat_) throw std::runtime_error(dat_name_ + ": write failed");
    if (owned_dat_) {
      owned_dat_->close();
      if (owned_dat_->fail()) {
        throw std::runtime_error(dat_name_ + ": closing failed");
      }
    }
  }

  void Own(std::unique_ptr<std::ofstream> dat) { owned_dat_ = std::move(dat); }

 private:
  void WriteDefinition(std::ostream& dfn) {
    std::string d = "DEFN   ST=RECD,RT=COMM;RT:A4;COMMENTS:A" +
                    std::to_string(kCommentWidth) + "\n";
    int n = 1;
    if (record_type_) {
      d += "DEFN " + std::to_string(n++) + " ST=RECD,RT=;RT:A4\n";
    }
    const std::string format =
        "E" + std::to_string(kWriteWidth) + "." + std::to_string(kWriteDecimals);
    for (std::size_t i : order_) {
      const ChannelInfo& c = schema_[i];
      d += "DEFN " + std::to_string(n++) + " ST=RECD,RT=;" + c.name + ":" +
           format + ":";
      const std::string unit = AttributeText(c.unit);
      const std::string long_name = AttributeText(c.long_name);
      if (!unit.empty()) d += "UNIT=" + unit + ",";
      d += std::string("NULL=") + kGdf2DefaultNull;
      if (!long_name.empty()) d += ",NAME=" + long_name;
      d += "\n";
    }
    d += "DEFN " + std::to_string(n) + " ST=RECD,RT=;END DEFN\n";
    dfn.write(d.data(), static_cast<std::streamsize>(d.size()));
    dfn.flush();
    if (!dfn) throw std::runtime_error(dfn_name_ + ": write failed");
  }

  void WriteComments(const std::string& comment) {
    std::string out;
    std::string_view rest = comment;
    while (!rest.empty()) {
      std::size_t nl = rest.find('\n');
      std::string_view para = rest.substr(0, nl);
      rest = nl == std::string_view::npos ? std::string_view()
                                          : rest.substr(nl + 1);
      std::string text;
      for (char c : para) {
        text += (static_cast<unsigned char>(c) < 0x20 || c == 0x7f) ? ' ' : c;
      }
      do {
        // Wrap at a blank where one is near the end of the line.
        std::size_t take = std::min<std::size_t>(text.size(), kCommentWidth - 1);
        if (take < text.size()) {
          const std::size_t blank = text.rfind(' ', take);
          if (blank != std::string::npos && blank > take / 2) take = blank;
        }
        out += "COMM " + text.substr(0, take) + "\n";
        text = std::string(Trim(text.substr(take)));
      } while (!text.empty());
    }
    dat_->write(out.data(), static_cast<std::streamsize>(out.size()));
    if (!*dat_) throw std::runtime_error(dat_name_ + ": write failed");
  }

  std::ostream* dat_;
  std::unique_ptr<std::ofstream> owned_dat_;
  std::string dfn_name_;
  std::string dat_name_;
  std::vector<ChannelInfo> schema_;
  std::vector<std::size_t> order_;
  std::string null_field_;
  double null_value_ = 0.0;
  std::size_t rows_written_ = 0;
  bool closed_ = false;
  bool record_type_ = true;  // records start with RT:A4 "DATA"
};

}  // namespace

std::unique_ptr<RecordingWriter> CreateGdf2Writer(
    std::ostream& dfn, std::ostream& dat, const std::vector<ChannelInfo>& schema,
    const WriteOptions& options) {
  return std::make_unique<Gdf2Writer>(dfn, dat, "<dfn>", "<dat>", schema,
                                      options);
}

std::unique_ptr<RecordingWriter> CreateGdf2Writer(
    const std::string& path, const std::vector<ChannelInfo>& schema,
    const WriteOptions& options) {
  std::size_t dot = 0;
  const std::string ext = Extension(path, &dot);
  std::string stem = path;
  bool upper = false;
  if (EqualsIgnoreCase(ext, "dfn") || EqualsIgnoreCase(ext, "dat")) {
    stem = path.substr(0, dot);
    upper = IsUpperExtension(ext);
  }
  const std::string dfn_path = stem + (upper ? ".DFN" : ".dfn");
  const std::string dat_path = stem + (upper ? ".DAT" : ".dat");
  for (const ChannelInfo& c : schema) CheckName(dfn_path, c);
  std::ofstream dfn(dfn_path, std::ios::binary | std::ios::trunc);
  if (!dfn.is_open()) {
    throw std::runtime_error(dfn_path + ": cannot create the file");
  }
  auto dat = std::make_unique<std::ofstream>(
      dat_path, std::ios::binary | std::ios::trunc);
  if (!dat->is_open()) {
    throw std::runtime_error(dat_path + ": cannot create the file");
  }
  auto writer = std::make_unique<Gdf2Writer>(dfn, *dat, dfn_path, dat_path,
                                             schema, options);
  dfn.close();
  if (dfn.fail()) throw std::runtime_error(dfn_path + ": closing failed");
  writer->Own(std::move(dat));
  return writer;
}

}  // namespace fluxtrim::io
