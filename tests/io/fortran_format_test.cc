// Fortran edit descriptors and fixed-width numbers (io/fortran_format.h).
// Decimal conversions are checked against Python's float() (correctly
// rounded), run through FLUXTRIM_PYTHON.

#include "io/fortran_format.h"

#include <gtest/gtest.h>

#include <cmath>
#include <cstdint>
#include <cstdlib>
#include <cstring>
#include <sstream>
#include <string>
#include <vector>

#include "tests/support/subprocess.h"

namespace fluxtrim::io {
namespace {

std::uint64_t Bits(double v) {
  std::uint64_t b;
  std::memcpy(&b, &v, sizeof(b));
  return b;
}

TEST(EditDescriptor, ParsesTheDescriptorsOfGdf2Files) {
  struct Case {
    const char* text;
    int repeat;
    char kind;
    char written;
    int width;
    int decimals;
    int exponent_digits;
  };
  // Forms of ISO/IEC 1539-1:2010 clause 10.7 (from memory), as met in .dfn
  // files.
  const Case cases[] = {
      {"F10.3", 1, 'F', 'F', 10, 3, 0},   {"f10.3", 1, 'F', 'F', 10, 3, 0},
      {"30F10.5", 30, 'F', 'F', 10, 5, 0}, {"E25.16", 1, 'E', 'E', 25, 16, 0},
      {"E25.16E3", 1, 'E', 'E', 25, 16, 3}, {"D25.16", 1, 'E', 'D', 25, 16, 0},
      {"g15.7", 1, 'E', 'G', 15, 7, 0},    {"I10", 1, 'I', 'I', 10, 0, 0},
      {"A4", 1, 'A', 'A', 4, 0, 0},        {"F 10 . 3", 1, 'F', 'F', 10, 3, 0},
      {"F8", 1, 'F', 'F', 8, 0, 0},        {"256I5", 256, 'I', 'I', 5, 0, 0},
  };
  for (const Case& c : cases) {
    EditDescriptor d;
    std::string error;
    ASSERT_TRUE(ParseEditDescriptor(c.text, &d, &error)) << c.text << error;
    EXPECT_EQ(d.repeat, c.repeat) << c.text;
    EXPECT_EQ(d.kind, c.kind) << c.text;
    EXPECT_EQ(d.written, c.written) << c.text;
    EXPECT_EQ(d.width, c.width) << c.text;
    EXPECT_EQ(d.decimals, c.decimals) << c.text;
    EXPECT_EQ(d.exponent_digits, c.exponent_digits) << c.text;
  }
  EditDescriptor d;
  std::string error;
  ASSERT_TRUE(ParseEditDescriptor("30F10.5", &d, &error));
  EXPECT_EQ(FormatEditDescriptor(d), "30F10.5");
}

TEST(EditDescriptor, RejectsWhatIsNotADataEditDescriptor) {
  for (const char* text : {"", "Q10.3", "X5", "L1", "F", "F0.1", "0F5.1",
                           "F10.", "F10.3.2", "A4.2x", "E10.3E0", "-F10.3"}) {
    EditDescriptor d;
    std::string error;
    EXPECT_FALSE(ParseEditDescriptor(text, &d, &error)) << text;
    EXPECT_NE(error.find("expected"), std::string::npos) << text << error;
  }
}

TEST(FortranNumber, ReadsFortranSpellingsLikeAnIndependentParser) {
  // Each text, with D exponents turned into E (the Fortran rule), must give
  // the bits that Python's float() gives.
  const std::vector<std::string> texts = {
      "  57123.456", "-0.0", "+12.5", "1.5D+03", "1.5d-03", "  -2.5E+02 ",
      ".5", "5.", "4.9406564584124654E-324", "2.4703282292062328E-324",
      "1.7976931348623157E+308", "123", "-0", "0.1", "1e23",
      "9.999999999999999e22", "1.0000000000000001", "\t7.25\t"};
  std::string args;
  for (const std::string& t : texts) args += " '" + t + "'";
  const std::string command =
      std::string(FLUXTRIM_PYTHON) +
      " -c \"import sys; [print(float(a.strip().replace('D','E')"
      ".replace('d','e')).hex()) for a in sys.argv[1:]]\"" + args;
  const test_support::CommandResult run = test_support::RunCommand(command);
  ASSERT_EQ(run.code, 0) << command;
  std::istringstream lines(run.output);
  std::string hex;
  for (const std::string& t : texts) {
    ASSERT_TRUE(std::getline(lines, hex)) << t;
    const double want = std::strtod(hex.c_str(), nullptr);
    double got = 0.0;
    ASSERT_EQ(ParseFortranNumber(t, &got), NumberStatus::kOk) << t;
    EXPECT_EQ(Bits(got), Bits(want)) << t << " python " << hex;
  }
}

TEST(FortranNumber, ReadsTheLetterlessThreeDigitExponent) {
  // Fortran writes E format with |exponent| > 99 without the letter:
  // "1.5+300" (ISO/IEC 1539-1:2010 10.7.2.3.3, from memory).
  double v = 0.0;
  ASSERT_EQ(ParseFortranNumber(" 1.5+300", &v), NumberStatus::kOk);
  EXPECT_EQ(v, 1.5e300);
  ASSERT_EQ(ParseFortranNumber("-2.0-300", &v), NumberStatus::kOk);
  EXPECT_EQ(v, -2.0e-300);
}

TEST(FortranNumber, ReadsUnderflowAsSignedZeroAndRejectsOverflow) {
  // Python: float('1e-400') == 0.0, float('-1e-400') == -0.0, float('1e400')
  // == inf (IEEE 754 round-to-nearest underflow and overflow).
  double v = 1.0;
  ASSERT_EQ(ParseFortranNumber("1e-400", &v), NumberStatus::kOk);
  EXPECT_EQ(v, 0.0);
  EXPECT_FALSE(std::signbit(v));
  ASSERT_EQ(ParseFortranNumber("-1.0D-400", &v), NumberStatus::kOk);
  EXPECT_TRUE(std::signbit(v));
  EXPECT_EQ(ParseFortranNumber("1e400", &v), NumberStatus::kOutOfRange);
  EXPECT_EQ(ParseFortranNumber("-0.001e312", &v), NumberStatus::kOutOfRange);
  ASSERT_EQ(ParseFortranNumber("0.0001e-320", &v), NumberStatus::kOk);
  EXPECT_EQ(v, 0.0);
}

TEST(FortranNumber, ClassifiesBlanksFillNonFiniteAndGarbage) {
  double v = 0.0;
  EXPECT_EQ(ParseFortranNumber("", &v), NumberStatus::kBlank);
  EXPECT_EQ(ParseFortranNumber("   \t ", &v), NumberStatus::kBlank);
  EXPECT_EQ(ParseFortranNumber(" *****", &v), NumberStatus::kOverflowFill);
  for (const char* t : {"nan", "NaN", "-nan", "inf", "-INF", "Infinity",
                        "1.#INF", "-1.#IND", "1.#QNAN"}) {
    EXPECT_EQ(ParseFortranNumber(t, &v), NumberStatus::kNonFinite) << t;
  }
  for (const char* t : {"abc", "1.2.3", "1e", "--1", "+-1", "1 2", "0x10",
                        "1,5", "12-", "-", ".", "e5", "1e5e5", "nan(1)x"}) {
    EXPECT_EQ(ParseFortranNumber(t, &v), NumberStatus::kInvalid) << t;
  }
}

TEST(FormatRoundTripE, WritesTheShortestDigitsWithAPointRightAligned) {
  // Shortest round-trip digits as Python's repr gives them (David Gay's
  // algorithm; repr(-0.0) '-0.0', repr(5e-324) '5e-324', repr(0.1) '0.1',
  // repr(57123.456) '57123.456', repr(-1.7976931348623157e308)), in E
  // layout.
  const struct {
    double v;
    const char* text;
  } cases[] = {
      {-0.0, "-0.0E+00"},
      {4.9406564584124654e-324, "5.0E-324"},
      {0.1, "1.0E-01"},
      {57123.456, "5.7123456E+04"},
      {1e300, "1.0E+300"},
      {-1.7976931348623157e308, "-1.7976931348623157E+308"},
      {1.0 / 3.0, "3.333333333333333E-01"},
  };
  for (const auto& c : cases) {
    std::string s;
    ASSERT_TRUE(FormatRoundTripE(c.v, 25, &s)) << c.text;
    const std::string text = c.text;
    EXPECT_EQ(s, std::string(25 - text.size(), ' ') + text) << c.v;
  }
  std::string s;
  EXPECT_FALSE(FormatRoundTripE(-1.7976931348623157e308, 23, &s));
}

}  // namespace
}  // namespace fluxtrim::io
