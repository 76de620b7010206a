#pragma once
// Fortran edit descriptors and fixed-width numbers, as used by ASEG-GDF2
// (gdf2.h). Reference: ISO/IEC 1539-1 (Fortran 2008), clause 10.7 "Data edit
// descriptors" (A, I, F, E, D, G; repeat counts; Ew.dEe exponent widths).

#include <string>
#include <string_view>

namespace fluxtrim::io {

struct EditDescriptor {
  int repeat = 1;        // leading repeat count r of rFw.d
  char kind = 'F';       // 'A', 'I', 'F' or 'E'; D and G are stored as 'E'
  char written = 'F';    // the letter as written, upper case (A I F E D G)
  int width = 0;         // w, characters per element (> 0)
  int decimals = 0;      // d; 0 when absent
  int exponent_digits = 0;  // e of Ew.dEe; 0 when absent
};

// Largest accepted repeat count and width: far beyond real files (a 1024-
// channel spectrum, 30-character fields) and small enough that a corrupt
// definition cannot make the reader allocate without bound.
inline constexpr int kMaxEditRepeat = 8192;
inline constexpr int kMaxEditWidth = 1 << 16;

// Parses "F10.3", "f10.3", "30F10.5", "E25.16E3", "D25.16", "G15.7", "I10",
// "A4". Blanks inside are ignored (as Fortran does). Returns false and sets
// *error to what was expected when the text is not one of these.
bool ParseEditDescriptor(std::string_view text, EditDescriptor* out,
                         std::string* error);

// Upper-case canonical text of a descriptor ("30F10.5", "E25.16").
std::string FormatEditDescriptor(const EditDescriptor& d);

enum class NumberStatus {
  kOk,            // *value set
  kBlank,         // only blanks: a null in GDF2
  kNonFinite,     // "nan", "inf", "-Infinity", "1.#INF", ...
  kOverflowFill,  // only '*': Fortran's fill for a value that did not fit
  kOutOfRange,    // magnitude beyond the largest double
  kInvalid,       // anything else
};

// Parses one fixed-width field as a number. Leading and trailing blanks
// (space, tab) are ignored; a leading '+' is accepted; Fortran exponents
// 'D'/'d' ("1.5D+03") and the letterless form that Fortran writes for
// three-digit exponents ("1.5+300", ISO/IEC 1539-1 10.7.2.3.3) are read as
// 'E'. A value that underflows the smallest subnormal reads as a signed zero,
// as a Fortran READ gives.
NumberStatus ParseFortranNumber(std::string_view field, double* value);

// Writes a finite v in E format with the fewest significant digits that
// read back to the same double (at most 17), always with a decimal point and
// an exponent of at least two digits ("5.712345E+04", "-0.0E+00",
// "5.0E-324"), right-aligned in width characters. Needs width >= 24 for
// every finite double. Returns false when the text does not fit.
bool FormatRoundTripE(double v, int width, std::string* out);

}  // namespace fluxtrim::io
