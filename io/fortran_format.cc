#include "io/fortran_format.h"

#include <charconv>
#include <cmath>
#include <limits>

namespace fluxtrim::io {
namespace {

bool IsBlank(char c) { return c == ' ' || c == '\t'; }
bool IsDigit(char c) { return c >= '0' && c <= '9'; }

char Upper(char c) {
  return (c >= 'a' && c <= 'z') ? static_cast<char>(c - 'a' + 'A') : c;
}

// Reads an unsigned decimal integer at s[*i]; false when there is none or it
// exceeds limit.
bool ReadCount(const std::string& s, std::size_t* i, int limit, int* out) {
  if (*i >= s.size() || !IsDigit(s[*i])) return false;
  long long v = 0;
  while (*i < s.size() && IsDigit(s[*i])) {
    v = v * 10 + (s[*i] - '0');
    if (v > limit) return false;
    ++*i;
  }
  *out = static_cast<int>(v);
  return true;
}

bool EqualsUpper(std::string_view text, std::string_view upper) {
  if (text.size() != upper.size()) return false;
  for (std::size_t i = 0; i < text.size(); ++i) {
    if (Upper(text[i]) != upper[i]) return false;
  }
  return true;
}

// Decimal order of magnitude of a valid from_chars number "[-]d.ddde[+-]x"
// (roughly floor(log10|v|)); only its sign is used.
long long DecimalOrder(const std::string& s) {
  std::size_t i = (s[0] == '-') ? 1 : 0;
  long long order = 0;
  bool seen_nonzero = false, after_point = false;
  long long leading = 0;  // digits before the point after leading zeros
  long long zeros_after_point = 0;
  for (; i < s.size() && s[i] != 'e' && s[i] != 'E'; ++i) {
    if (s[i] == '.') {
      after_point = true;
    } else if (!seen_nonzero && s[i] == '0') {
      if (after_point) ++zeros_after_point;
    } else {
      if (!seen_nonzero && after_point) {
        order = -zeros_after_point - 1;
        seen_nonzero = true;
      } else if (!after_point) {
        seen_nonzero = true;
        ++leading;
      }
    }
  }
  if (!seen_nonzero) return -1;  // zero mantissa cannot overflow
  if (leading > 0) order = leading - 1;
  long long exponent = 0;
  if (i < s.size()) {
    ++i;
    bool negative = false;
    if (i < s.size() && (s[i] == '+' || s[i] == '-')) negative = s[i++] == '-';
    for (; i < s.size() && IsDigit(s[i]); ++i) {
      if (exponent < 1000000000) exponent = exponent * 10 + (s[i] - '0');
    }
    if (negative) exponent = -exponent;
  }
  return order + exponent;
}

}  // namespace

bool ParseEditDescriptor(std::string_view text, EditDescriptor* out,
                         std::string* error) {
  const std::string expected =
      "expected a Fortran edit descriptor [r]Aw, [r]Iw, [r]Fw.d, [r]Ew.d, "
      "[r]Dw.d or [r]Gw.d such as F10.3, E25.16, I6, A4 or 30F10.5";
  std::string s;
  for (char c : text) {
    if (!IsBlank(c)) s.push_back(Upper(c));
  }
  EditDescriptor d;
  std::size_t i = 0;
  if (i < s.size() && IsDigit(s[i])) {
    if (!ReadCount(s, &i, kMaxEditRepeat, &d.repeat) || d.repeat < 1) {
      *error = "repeat count must be 1.." + std::to_string(kMaxEditRepeat) +
               "; " + expected;
      return false;
    }
  }
  if (i >= s.size()) {
    *error = expected;
    return false;
  }
  const char letter = s[i++];
  switch (letter) {
    case 'A':
    case 'I':
    case 'F':
    case 'E':
      d.kind = letter;
      break;
    case 'D':
    case 'G':
      d.kind = 'E';
      break;
    default:
      *error = std::string("unknown format letter '") + letter + "'; " +
               expected;
      return false;
  }
  d.written = letter;
  if (!ReadCount(s, &i, kMaxEditWidth, &d.width) || d.width < 1) {
    *error = "width must be 1.." + std::to_string(kMaxEditWidth) + "; " +
             expected;
    return false;
  }
  if (i < s.size() && s[i] == '.' && d.kind != 'A') {
    ++i;
    if (!ReadCount(s, &i, kMaxEditWidth, &d.decimals)) {
      *error = "expected digits after '.'; " + expected;
      return false;
    }
  }
  if (i < s.size() && s[i] == 'E' && d.kind == 'E') {
    ++i;
    if (!ReadCount(s, &i, 9, &d.exponent_digits) || d.exponent_digits < 1) {
      *error = "expected exponent digits 1..9 after 'E' as in E25.16E3; " +
               expected;
      return false;
    }
  }
  if (i != s.size()) {
    *error = "unexpected '" + s.substr(i) + "'; " + expected;
    return false;
  }
  *out = d;
  return true;
}

std::string FormatEditDescriptor(const EditDescriptor& d) {
  std::string s;
  if (d.repeat != 1) s += std::to_string(d.repeat);
  s += d.written;
  s += std::to_string(d.width);
  if (d.kind == 'F' || d.kind == 'E') s += "." + std::to_string(d.decimals);
  if (d.exponent_digits > 0) s += "E" + std::to_string(d.exponent_digits);
  return s;
}

NumberStatus ParseFortranNumber(std::string_view field, double* value) {
  std::size_t b = 0, e = field.size();
  while (b < e && IsBlank(field[b])) ++b;
  while (e > b && IsBlank(field[e - 1])) --e;
  if (b == e) return NumberStatus::kBlank;
  const std::string_view t = field.substr(b, e - b);
  if (t.find_first_not_of('*') == std::string_view::npos) {
    return NumberStatus::kOverflowFill;
  }

  // Fast path: plain C notation, by far the most common in files.
  {
    std::string_view f = t;
    if (f[0] == '+') {
      f.remove_prefix(1);
      if (f.empty() || f[0] == '+' || f[0] == '-') return NumberStatus::kInvalid;
    }
    double v = 0.0;
    const std::from_chars_result r = std::from_chars(
        f.data(), f.data() + f.size(), v, std::chars_format::general);
    if (r.ec == std::errc() && r.ptr == f.data() + f.size() &&
        std::isfinite(v)) {
      *value = v;
      return NumberStatus::kOk;
    }
  }

  // Normalise to what std::from_chars reads: no leading '+', 'e' exponent.
  std::string s;
  s.reserve(t.size() + 1);
  std::size_t i = 0;
  if (t[0] == '+') i = 1;
  if (i < t.size() && (t[i] == '+' || t[i] == '-') && i == 1) {
    return NumberStatus::kInvalid;  // "+-1"
  }
  for (; i < t.size(); ++i) {
    const char c = t[i];
    if (c == 'D' || c == 'd') {
      s.push_back('e');
    } else if ((c == '+' || c == '-') && !s.empty() &&
               (IsDigit(s.back()) || s.back() == '.')) {
      // "1.5+300": Fortran drops the letter for 3-digit exponents.
      s.push_back('e');
      s.push_back(c);
    } else {
      s.push_back(c);
    }
  }

  // Non-finite spellings of C, Fortran and MSVC runtimes.
  {
    std::string_view u = t;
    if (!u.empty() && (u[0] == '+' || u[0] == '-')) u.remove_prefix(1);
    if (EqualsUpper(u, "NAN") || EqualsUpper(u, "INF") ||
        EqualsUpper(u, "INFINITY") || EqualsUpper(u, "1.#INF") ||
        EqualsUpper(u, "1.#IND") || EqualsUpper(u, "1.#QNAN") ||
        EqualsUpper(u, "NAN(IND)") || EqualsUpper(u, "NANQ") ||
        EqualsUpper(u, "NANS")) {
      return NumberStatus::kNonFinite;
    }
  }

  double v = 0.0;
  const char* first = s.data();
  const char* last = s.data() + s.size();
  const std::from_chars_result r =
      std::from_chars(first, last, v, std::chars_format::general);
  if (r.ptr != last || r.ec == std::errc::invalid_argument) {
    return NumberStatus::kInvalid;
  }
  if (r.ec == std::errc::result_out_of_range) {
    // from_chars reports underflow and overflow alike; the decimal order of
    // magnitude tells them apart (locale-free, unlike strtod).
    if (DecimalOrder(s) > 0) return NumberStatus::kOutOfRange;
    v = (s[0] == '-') ? -0.0 : 0.0;
  }
  if (!std::isfinite(v)) return NumberStatus::kNonFinite;
  *value = v;
  return NumberStatus::kOk;
}

bool FormatRoundTripE(double v, int width, std::string* out) {
  // std::to_chars without a precision gives the shortest digits that read
  // back to the same double (C++17 [utility.to.chars]/2), in printf's
  // exponent layout.
  char buf[64];
  const std::to_chars_result r =
      std::to_chars(buf, buf + sizeof(buf) - 2, v, std::chars_format::scientific);
  if (r.ec != std::errc()) return false;
  std::string text(buf, r.ptr);
  const std::size_t e = text.find('e');
  if (e == std::string::npos) return false;
  text[e] = 'E';
  // A decimal point always: Fortran reads digits without one under the
  // implied-decimal rule of Ew.d (ISO/IEC 1539-1 10.7.2.3.2).
  if (text.find('.') == std::string::npos) {
    text.insert(e, ".0");
  }
  if (static_cast<int>(text.size()) > width) return false;
  out->append(static_cast<std::size_t>(width) - text.size(), ' ');
  out->append(text);
  return true;
}

}  // namespace fluxtrim::io
