#include "io/csv.h"

#include <algorithm>
#include <cerrno>
#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <iostream>
#include <limits>
#include <stdexcept>
#include <utility>

#include "io/channel_map.h"
#include "io/error.h"

namespace fluxtrim::io {
namespace {

constexpr double kNaN = std::numeric_limits<double>::quiet_NaN();
// Bytes of formatted rows collected before they go to the stream.
constexpr std::size_t kWriteBufferBytes = std::size_t{1} << 20;
// Longest text std::to_chars makes for a double ("-2.2250738585072014e-308").
constexpr std::size_t kMaxNumberChars = 32;
// Rows reserved per column up front; more grow geometrically.
constexpr std::size_t kReserveRows = 1 << 16;

bool IsBlank(char c) { return c == ' ' || c == '\t'; }

// 10^0 .. 10^22: every one is exactly a double.
constexpr double kExactPowersOf10[] = {
    1e0,  1e1,  1e2,  1e3,  1e4,  1e5,  1e6,  1e7,  1e8,  1e9,  1e10, 1e11,
    1e12, 1e13, 1e14, 1e15, 1e16, 1e17, 1e18, 1e19, 1e20, 1e21, 1e22};

// Fast path for the numbers loggers write: [-]digits[.digits], no exponent.
// When the digits form an integer w <= 2^53 and there are at most 22 after
// the point, w and 10^k are exact doubles and the one IEEE division w / 10^k
// is correctly rounded, the same result as std::from_chars (Clinger 1990,
// "How to read floating point numbers accurately", PLDI, the fast path).
// Returns the end of the number, or nullptr to leave the text to
// std::from_chars.
inline const char* ParsePlainDecimal(const char* p, const char* e,
                                     double* out) {
  const bool negative = p < e && *p == '-';
  if (negative) ++p;
  std::uint64_t w = 0;
  int digits = 0;
  while (p < e && static_cast<unsigned>(*p - '0') < 10 && digits < 20) {
    w = 10 * w + static_cast<unsigned>(*p - '0');
    ++p;
    ++digits;
  }
  int fraction = 0;
  if (p < e && *p == '.') {
    ++p;
    while (p < e && static_cast<unsigned>(*p - '0') < 10 && digits < 20) {
      w = 10 * w + static_cast<unsigned>(*p - '0');
      ++p;
      ++digits;
      ++fraction;
    }
  }
  // 19 digits always fit in 64 bits; more (or an exponent) go the long way.
  if (digits == 0 || digits > 19 || fraction > 22 ||
      w > (std::uint64_t{1} << 53)) {
    return nullptr;
  }
  if (p < e && static_cast<unsigned>(*p - '0') < 10) return nullptr;
  double v = static_cast<double>(w);
  if (fraction > 0) v /= kExactPowersOf10[fraction];
  *out = negative ? -v : v;
  return p;
}

std::string_view Trim(std::string_view s) {
  while (!s.empty() && IsBlank(s.front())) s.remove_prefix(1);
  while (!s.empty() && IsBlank(s.back())) s.remove_suffix(1);
  return s;
}

std::string FormatDouble(double v) {
  char buf[kMaxNumberChars];
  const auto r = std::to_chars(buf, buf + sizeof buf, v);
  return std::string(buf, r.ptr);
}

// Field text for a message: at most 40 characters.
std::string Excerpt(std::string_view s) {
  constexpr std::size_t kMax = 40;
  if (s.size() <= kMax) return std::string(s);
  return std::string(s.substr(0, kMax)) + "...";
}

struct HeaderField {
  std::string text;
  std::size_t column;  // 1-based
};

// Splits a header or units line on commas; fields may be double-quoted with
// "" standing for one quote (RFC 4180, section 2). `column_base` is the
// 0-based column of line[0] in the file's line.
std::vector<HeaderField> SplitQuoted(std::string_view line,
                                     std::size_t column_base,
                                     const std::string& file,
                                     std::size_t line_number) {
  std::vector<HeaderField> fields;
  std::size_t i = 0;
  for (;;) {
    while (i < line.size() && IsBlank(line[i])) ++i;
    HeaderField field;
    field.column = column_base + i + 1;
    if (i < line.size() && line[i] == '"') {
      ++i;
      for (;;) {
        if (i >= line.size()) {
          throw InputError(file, line_number, field.column,
                           "unterminated quote: expected a closing '\"'");
        }
        if (line[i] == '"') {
          if (i + 1 < line.size() && line[i + 1] == '"') {
            field.text += '"';
            i += 2;
            continue;
          }
          ++i;
          break;
        }
        field.text += line[i++];
      }
      while (i < line.size() && IsBlank(line[i])) ++i;
      if (i < line.size() && line[i] != ',') {
        throw InputError(file, line_number, column_base + i + 1,
                         "expected ',' after a quoted name, found '" +
                             std::string(1, line[i]) + "'");
      }
    } else {
      const std::size_t end = std::min(line.find(',', i), line.size());
      field.text = std::string(Trim(line.substr(i, end - i)));
      i = end;
    }
    for (std::size_t k = 0; k < field.text.size(); ++k) {
      const auto c = static_cast<unsigned char>(field.text[k]);
      if ((c < 0x20 && c != '\t') || c == 0x7f) {
        char code[8];
        std::snprintf(code, sizeof code, "0x%02x", c);
        throw InputError(file, line_number, field.column,
                         std::string("control character ") + code +
                             " in a name: expected text (is this a CSV "
                             "file?)");
      }
    }
    fields.push_back(std::move(field));
    if (i >= line.size()) break;
    ++i;  // the comma
  }
  return fields;
}

// CSV quoting for names and units written by CsvWriter.
std::string QuoteIfNeeded(const std::string& s) {
  // Quote what the reader would otherwise split, trim, strip or take for a
  // comment or a byte order mark.
  const bool needs =
      s.find_first_of(",\"\r") != std::string::npos ||
      (!s.empty() && (IsBlank(s.front()) || IsBlank(s.back()) ||
                      s.front() == '#' || s.front() == '\xEF'));
  if (!needs) return s;
  std::string out = "\"";
  for (char c : s) {
    if (c == '"') out += '"';
    out += c;
  }
  out += '"';
  return out;
}

}  // namespace

std::string DefaultUnit(std::string_view name) {
  static const std::pair<const char*, const char*> kUnits[] = {
      {"time", "s"},     {"bx", "nT"},    {"by", "nT"},      {"bz", "nT"},
      {"f", "nT"},       {"roll", "deg"}, {"pitch", "deg"},  {"heading", "deg"},
      {"lat", "deg"},    {"lon", "deg"},  {"alt", "m"},
  };
  for (const auto& [n, unit] : kUnits) {
    if (EqualsIgnoreCase(name, n)) return unit;
  }
  return "";
}

// ---------------------------------------------------------------- reader

CsvReader::CsvReader(const std::string& path, const ReadOptions& options)
    : CsvReader(OpenByteSource(path), path == "-" ? "<stdin>" : path,
                options) {}

CsvReader::CsvReader(std::istream& in, std::string name,
                     const ReadOptions& options)
    : CsvReader(std::make_unique<IstreamSource>(in), std::move(name),
                options) {}

CsvReader::CsvReader(std::unique_ptr<ByteSource> source, std::string name,
                     const ReadOptions& options)
    : name_(std::move(name)), options_(options), input_(std::move(source)) {
  ReadHeader();
}

CsvReader::~CsvReader() = default;

void CsvReader::Fail(std::size_t column, const std::string& message) const {
  throw InputError(name_, line_, column, message);
}

CsvReader::LineStatus CsvReader::NextLine(bool block, std::string_view* line,
                                          bool* has_newline) {
  for (;;) {
    const char* data = input_.data();
    const std::size_t size = input_.size();
    if (scanned_ < size) {
      const void* nl = std::memchr(data + scanned_, '\n', size - scanned_);
      if (nl != nullptr) {
        const std::size_t len =
            static_cast<std::size_t>(static_cast<const char*>(nl) - data);
        if (len > kMaxLineBytes) {
          ++line_;
          Fail(0, "line longer than " + std::to_string(kMaxLineBytes) +
                      " bytes: expected CSV text with one sample per line");
        }
        *line = std::string_view(data, len);
        *has_newline = true;
        input_.Consume(len + 1);
        break;
      }
      scanned_ = size;
    }
    if (input_.at_end()) {
      if (size == 0) return LineStatus::kEnd;
      *line = std::string_view(data, size);
      *has_newline = false;
      input_.Consume(size);
      break;
    }
    if (!block && !input_.Ready()) return LineStatus::kWouldBlock;
    if (size >= kMaxLineBytes) {
      ++line_;
      Fail(0, "line longer than " + std::to_string(kMaxLineBytes) +
                  " bytes: expected CSV text with one sample per line");
    }
    try {
      input_.Fill(kMaxLineBytes + 1);
    } catch (const std::runtime_error& e) {
      throw InputError(name_, line_ + 1, 0, e.what());
    }
  }
  scanned_ = 0;
  ++line_;
  if (!line->empty() && line->back() == '\r') line->remove_suffix(1);
  return LineStatus::kLine;
}

void CsvReader::ReadHeader() {
  std::vector<HeaderField> units;
  std::size_t units_line = 0;
  std::vector<HeaderField> names;
  bool saw_anything = false;
  for (;;) {
    std::string_view line;
    bool has_newline = false;
    if (NextLine(true, &line, &has_newline) == LineStatus::kEnd) {
      if (!saw_anything) {
        throw InputError(name_, 0, 0,
                         "the file is empty: expected a header row of "
                         "channel names (e.g. time,bx,by,bz,f)");
      }
      throw InputError(name_, line_, 0,
                       "no header row (only comments and blank lines): "
                       "expected a row of channel names (e.g. "
                       "time,bx,by,bz,f)");
    }
    saw_anything = true;
    std::size_t base = 0;
    if (line_ == 1 && line.substr(0, 3) == "\xEF\xBB\xBF") {
      line.remove_prefix(3);  // UTF-8 byte order mark (spreadsheet exports)
      base = 3;
    }
    const std::string_view trimmed = Trim(line);
    if (trimmed.empty()) continue;
    if (trimmed.front() == '#') {
      std::string_view body = Trim(trimmed.substr(1));
      constexpr std::string_view kUnits = "units";
      if (body.size() > kUnits.size() &&
          EqualsIgnoreCase(body.substr(0, kUnits.size()), kUnits)) {
        std::string_view rest = Trim(body.substr(kUnits.size()));
        if (!rest.empty() && rest.front() == ':') {
          rest.remove_prefix(1);
          const std::size_t offset =
              static_cast<std::size_t>(rest.data() - line.data()) + base;
          units = SplitQuoted(rest, offset, name_, line_);
          units_line = line_;
        }
      }
      continue;
    }
    names = SplitQuoted(line, base, name_, line_);
    break;
  }
  header_line_ = line_;

  if (names.size() == 1) {
    const std::string& only = names.front().text;
    for (const char sep : {';', '\t', '|'}) {
      if (only.find(sep) != std::string::npos) {
        Fail(names.front().column,
             std::string("the header uses '") + (sep == '\t' ? "\\t" : std::string(1, sep)) +
                 "' between names: expected comma-separated columns");
      }
    }
  }
  for (std::size_t j = 0; j < names.size(); ++j) {
    if (names[j].text.empty()) {
      Fail(names[j].column, "empty name for column " + std::to_string(j + 1) +
                                " of the header: every column needs a name");
    }
    for (std::size_t k = 0; k < j; ++k) {
      if (EqualsIgnoreCase(names[k].text, names[j].text)) {
        Fail(names[j].column,
             "column '" + names[j].text + "' appears twice in the header "
             "(also column " + std::to_string(k + 1) +
                 "): expected unique names");
      }
    }
  }
  if (units_line > 0 && units.size() != names.size()) {
    throw InputError(name_, units_line, 0,
                     "the units comment lists " +
                         std::to_string(units.size()) +
                         " units but the header has " +
                         std::to_string(names.size()) +
                         " columns: expected one unit per column");
  }

  std::vector<std::string> file_names;
  for (const HeaderField& f : names) file_names.push_back(f.text);
  std::vector<std::string> final_names;
  try {
    final_names = MapChannelNames(file_names, options_.rename);
  } catch (const std::invalid_argument& e) {
    Fail(0, e.what());
  }

  channels_.clear();
  for (std::size_t j = 0; j < names.size(); ++j) {
    ChannelInfo info;
    info.name = final_names[j];
    info.unit = units_line > 0 && !units[j].text.empty()
                    ? units[j].text
                    : DefaultUnit(info.name);
    channels_.push_back(std::move(info));
  }

  try {
    CheckRequiredChannels(channels_, options_.required);
  } catch (const std::invalid_argument& e) {
    Fail(0, e.what());
  }
  for (std::size_t j = 0; j < channels_.size(); ++j) {
    if (EqualsIgnoreCase(channels_[j].name, "time")) time_index_ = j;
  }
  row_.assign(channels_.size(), kNaN);
}

double CsvReader::NonFinite(double value, const char* begin, const char* end,
                            const char* line_begin, std::size_t index) {
  if (options_.non_finite == NonFinitePolicy::kGap) return kNaN;
  (void)value;
  Fail(static_cast<std::size_t>(begin - line_begin) + 1,
       "channel '" + channels_[index].name + "': '" +
           Excerpt(std::string_view(begin, static_cast<std::size_t>(end - begin))) +
           "' where a finite number is expected (--nonfinite gap reads it "
           "as a missing sample)");
}

double CsvReader::ParseFieldSlow(const char* begin, const char* line_begin,
                                 const char* line_end, std::size_t index,
                                 const char** next) {
  const void* comma =
      std::memchr(begin, ',', static_cast<std::size_t>(line_end - begin));
  const char* field_end =
      comma != nullptr ? static_cast<const char*>(comma) : line_end;
  *next = field_end;
  std::string_view text = Trim(std::string_view(
      begin, static_cast<std::size_t>(field_end - begin)));
  if (!text.empty() && text.front() == '"') {
    if (text.size() < 2 || text.back() != '"') {
      Fail(static_cast<std::size_t>(text.data() - line_begin) + 1,
           "channel '" + channels_[index].name +
               "': unterminated quote: expected a closing '\"'");
    }
    text = Trim(text.substr(1, text.size() - 2));
  }
  if (text.empty()) return kNaN;
  const std::size_t column =
      static_cast<std::size_t>(text.data() - line_begin) + 1;
  const char* num = text.data();
  const char* num_end = text.data() + text.size();
  if (*num == '+' && num + 1 < num_end &&
      ((num[1] >= '0' && num[1] <= '9') || num[1] == '.')) {
    ++num;
  }
  double v = 0;
  const auto r = std::from_chars(num, num_end, v);
  if (r.ec == std::errc::result_out_of_range && r.ptr == num_end) {
    Fail(column, "channel '" + channels_[index].name + "': '" +
                     Excerpt(text) + "' is outside the range of a double");
  }
  if (r.ec != std::errc() || r.ptr != num_end) {
    Fail(column, "channel '" + channels_[index].name +
                     "': expected a number, found '" + Excerpt(text) + "'");
  }
  if (!std::isfinite(v)) {
    return NonFinite(v, text.data(), text.data() + text.size(), line_begin,
                     index);
  }
  return v;
}

void CsvReader::FieldCountError(std::string_view line, bool has_newline) {
  std::size_t found = 1;
  for (char c : line) found += c == ',';
  const std::size_t want = channels_.size();
  if (found < want) {
    if (!has_newline) {
      Fail(line.size() + 1,
           "the last line is truncated: " + std::to_string(found) + " of " +
               std::to_string(want) +
               " fields and no newline at the end of the file (was the "
               "recording cut off?)");
    }
    Fail(line.size() + 1, "expected " + std::to_string(want) +
                              " fields (" + JoinChannelNames(channels_) +
                              "), found " + std::to_string(found));
  }
  // Column of the first extra field.
  std::size_t commas = 0, column = line.size() + 1;
  for (std::size_t i = 0; i < line.size(); ++i) {
    if (line[i] == ',' && ++commas == want) {
      column = i + 2;
      break;
    }
  }
  Fail(column, "expected " + std::to_string(want) + " fields (" +
                   JoinChannelNames(channels_) + "), found " +
                   std::to_string(found));
}

void CsvReader::ParseRow(std::string_view line, bool has_newline) {
  const char* const b = line.data();
  const char* const e = b + line.size();
  const char* p = b;
  const std::size_t n = channels_.size();
  std::size_t time_column = 0;
  for (std::size_t c = 0; c < n; ++c) {
    if (c == time_index_) time_column = static_cast<std::size_t>(p - b) + 1;
    double v;
    if (p == e || *p == ',') {
      v = kNaN;  // empty field: missing value
    } else {
      const char* end = ParsePlainDecimal(p, e, &v);
      if (end != nullptr && (end == e || *end == ',')) {
        p = end;
      } else {
        const auto r = std::from_chars(p, e, v);
        if (r.ec == std::errc() && (r.ptr == e || *r.ptr == ',')) {
          if (!std::isfinite(v)) v = NonFinite(v, p, r.ptr, b, c);
          p = r.ptr;
        } else {
          v = ParseFieldSlow(p, b, e, c, &p);
        }
      }
    }
    row_[c] = v;
    if (c + 1 < n) {
      if (p == e) FieldCountError(line, has_newline);
      ++p;  // the comma
    }
  }
  if (p != e) FieldCountError(line, has_newline);

  const double t = row_[time_index_];
  if (std::isnan(t)) {
    Fail(time_column, "time is missing: every sample needs a time (s)");
  }
  if (have_last_time_ && !(t > last_time_) &&
      options_.time_order == TimeOrderPolicy::kReject) {
    if (t == last_time_) {
      Fail(time_column, "time " + FormatDouble(t) +
                            " repeats the time of line " +
                            std::to_string(last_time_line_) +
                            " (duplicate sample): expected increasing times");
    }
    Fail(time_column, "time " + FormatDouble(t) + " goes backwards (line " +
                          std::to_string(last_time_line_) + " has " +
                          FormatDouble(last_time_) +
                          "): expected increasing times");
  }
  have_last_time_ = true;
  last_time_ = t;
  last_time_line_ = line_;
}

std::size_t CsvReader::ReadChunk(Table* chunk, std::size_t max_rows) {
  if (pending_error_) throw *pending_error_;
  chunk->ResetRows(channels_);
  if (ended_ || max_rows == 0) return 0;

  const std::size_t n = channels_.size();
  std::vector<std::vector<double>*> columns(n);
  for (std::size_t c = 0; c < n; ++c) {
    columns[c] = &chunk->channel(c).values;
    columns[c]->reserve(std::min(max_rows, kReserveRows));
  }
  std::size_t rows = 0;
  while (rows < max_rows) {
    std::string_view line;
    bool has_newline = false;
    LineStatus status;
    try {
      status = NextLine(rows == 0, &line, &has_newline);
    } catch (const InputError& e) {
      pending_error_ = std::make_unique<InputError>(e);
      if (rows == 0) throw;
      break;
    }
    if (status == LineStatus::kWouldBlock) break;
    if (status == LineStatus::kEnd) {
      ended_ = true;
      if (rows_read_ + rows == 0) {
        pending_error_ = std::make_unique<InputError>(
            name_, header_line_, 0,
            "the header is not followed by any samples: expected at least "
            "one data row");
        throw *pending_error_;
      }
      break;
    }
    if (line.empty()) continue;
    if (IsBlank(line.front()) || line.front() == '#') {
      const std::string_view t = Trim(line);
      if (t.empty() || t.front() == '#') continue;
    }
    try {
      ParseRow(line, has_newline);
    } catch (const InputError& e) {
      pending_error_ = std::make_unique<InputError>(e);
      if (rows == 0) throw;
      break;
    }
    for (std::size_t c = 0; c < n; ++c) columns[c]->push_back(row_[c]);
    ++rows;
  }
  rows_read_ += rows;
  return rows;
}

// ---------------------------------------------------------------- writer

namespace {

void CheckSchema(const std::vector<ChannelInfo>& schema) {
  for (std::size_t j = 0; j < schema.size(); ++j) {
    const std::string& name = schema[j].name;
    if (name.empty()) {
      throw std::invalid_argument("channel " + std::to_string(j + 1) +
                                  " has no name");
    }
    if (name.find_first_of("\r\n") != std::string::npos) {
      throw std::invalid_argument("channel name '" + name +
                                  "' contains a line break");
    }
    for (std::size_t k = 0; k < j; ++k) {
      if (EqualsIgnoreCase(schema[k].name, name)) {
        throw std::invalid_argument("channel '" + name + "' is present twice");
      }
    }
  }
}

}  // namespace

CsvWriter::CsvWriter(const std::string& path,
                     const std::vector<ChannelInfo>& schema,
                     const WriteOptions& options)
    : name_(path == "-" ? "<stdout>" : path), out_(&std::cout), schema_(schema) {
  CheckSchema(schema_);
  if (path != "-") {
    auto file = std::make_unique<std::ofstream>(
        path, std::ios::binary | std::ios::trunc);
    if (!file->is_open()) {
      throw std::runtime_error(path + ": cannot create: " +
                               std::strerror(errno));
    }
    owned_ = std::move(file);
    out_ = owned_.get();
  }
  WriteHeader(options);
}

CsvWriter::CsvWriter(std::ostream& out, std::string name,
                     const std::vector<ChannelInfo>& schema,
                     const WriteOptions& options)
    : name_(std::move(name)), out_(&out), schema_(schema) {
  CheckSchema(schema_);
  WriteHeader(options);
}

CsvWriter::~CsvWriter() {
  if (closed_) return;
  try {
    Close();
  } catch (...) {
    // Destructors must not throw; Close() reports failures to callers that
    // care.
  }
}

void CsvWriter::WriteHeader(const WriteOptions& options) {
  std::string text;
  std::size_t start = 0;
  while (!options.comment.empty() && start <= options.comment.size()) {
    std::size_t end = options.comment.find('\n', start);
    if (end == std::string::npos) end = options.comment.size();
    std::string line = options.comment.substr(start, end - start);
    if (!line.empty() && line.back() == '\r') line.pop_back();
    text += "# " + line + "\n";
    start = end + 1;
  }
  const bool any_unit =
      std::any_of(schema_.begin(), schema_.end(),
                  [](const ChannelInfo& c) { return !c.unit.empty(); });
  if (any_unit) {
    text += "# units: ";
    for (std::size_t j = 0; j < schema_.size(); ++j) {
      std::string unit = schema_[j].unit;
      std::replace(unit.begin(), unit.end(), '\n', ' ');
      std::replace(unit.begin(), unit.end(), '\r', ' ');
      if (j > 0) text += ',';
      text += QuoteIfNeeded(unit);
    }
    text += '\n';
  }
  for (std::size_t j = 0; j < schema_.size(); ++j) {
    if (j > 0) text += ',';
    text += QuoteIfNeeded(schema_[j].name);
  }
  text += '\n';
  buffer_.assign(text.begin(), text.end());
  used_ = buffer_.size();
}

void CsvWriter::Write(const Table& chunk) {
  if (closed_) throw std::logic_error(name_ + ": Write after Close");
  if (chunk.cols() != schema_.size()) {
    throw std::invalid_argument(name_ + ": chunk has " +
                                std::to_string(chunk.cols()) +
                                " channels, the writer " +
                                std::to_string(schema_.size()));
  }
  std::vector<const double*> columns(schema_.size());
  for (std::size_t c = 0; c < schema_.size(); ++c) {
    if (!EqualsIgnoreCase(chunk.channel(c).info.name, schema_[c].name)) {
      throw std::invalid_argument(name_ + ": chunk channel '" +
                                  chunk.channel(c).info.name +
                                  "' where the writer has '" +
                                  schema_[c].name + "'");
    }
    columns[c] = chunk.channel(c).values.data();
  }
  const std::size_t rows = chunk.rows();
  const std::size_t row_max = schema_.size() * (kMaxNumberChars + 1) + 1;
  // Collect up to kWriteBufferBytes of text per write to the stream; a small
  // table gets a small buffer.
  const std::size_t want =
      std::min(kWriteBufferBytes, std::max(used_, rows * row_max)) + row_max;
  if (buffer_.size() < want) buffer_.resize(want);
  const std::size_t drain_at = buffer_.size() - row_max;
  if (used_ >= drain_at) Drain();  // e.g. a long comment header
  char* const limit = buffer_.data() + buffer_.size();
  for (std::size_t r = 0; r < rows; ++r) {
    char* out = buffer_.data() + used_;
    for (std::size_t c = 0; c < columns.size(); ++c) {
      if (c > 0) *out++ = ',';
      const double v = columns[c][r];
      if (!std::isnan(v)) out = std::to_chars(out, limit, v).ptr;
    }
    *out++ = '\n';
    used_ = static_cast<std::size_t>(out - buffer_.data());
    if (used_ >= drain_at) Drain();
  }
}

void CsvWriter::Drain() {
  if (used_ == 0) return;
  out_->write(buffer_.data(), static_cast<std::streamsize>(used_));
  used_ = 0;
  if (!*out_) throw std::runtime_error(name_ + ": write failed");
}

void CsvWriter::Flush() {
  Drain();
  out_->flush();
  if (!*out_) throw std::runtime_error(name_ + ": write failed");
}

void CsvWriter::Close() {
  if (closed_) return;
  closed_ = true;
  Drain();
  out_->flush();
  if (auto* file = dynamic_cast<std::ofstream*>(owned_.get())) file->close();
  if (!*out_) throw std::runtime_error(name_ + ": write failed");
}

}  // namespace fluxtrim::io
