#pragma once
// ASEG-GDF2 (Australian Society of Exploration Geophysicists, "ASEG-GDF2: A
// standard for point located data exchange", Pratt 2003, revision 4): a
// `.dfn` file defines fixed-width fields, a `.dat` file holds the records.
//
// Reading
//   - `.dfn` lines `DEFN [n] ST=RECD,RT=<type>;<NAME>:<format>[:<attr>,...]`
//     (split on `;`, then `:` and `,`). Fields of one record type accumulate
//     over all DEFN lines in file order. An empty `RT=` defines the data
//     record; `RT=COMM` (and any other type) is recognised and skipped.
//     Attributes: `UNIT=`/`UNITS=` -> ChannelInfo::unit, `NAME=` ->
//     ChannelInfo::long_name, `NULL=`; anything else is a free-text comment.
//     Tolerated: `ST=RECORD`, `:NULL=` as well as `,NULL=`, any letter case,
//     spaces around tokens, no number after DEFN, CRLF line ends, the
//     `DEFN n ST=RECD,RT=;END DEFN` terminator (lines after it are ignored).
//   - Formats are Fortran edit descriptors `[r]Aw`, `[r]Iw`, `[r]Fw.d`,
//     `[r]Ew.d[Ee]`, `[r]Dw.d` (= E), `[r]Gw.d` (= E). Values are cut from
//     fixed columns by width (adjacent fields may touch), trimmed, and parsed
//     with std::from_chars; a leading `+`, Fortran `D` exponents and the
//     letterless exponent `1.0-300` are accepted. The number is taken as
//     written: Fortran's implied decimal point for digits without a `.` is
//     not applied. A blank numeric field is a null.
//   - A repeat count (`30F10.5` on field `SPEC`) is an array field: it
//     becomes the channels `SPEC_0` ... `SPEC_29`.
//   - `A` fields other than the leading `RT:A4` are text: they are kept out
//     of the numeric table and listed by Gdf2Reader::skipped_text_fields().
//   - When the data definition starts with `RT:A4`, each `.dat` line starts
//     with its 4-character record type; `COMM` lines (and lines of any other
//     defined record type) are skipped. Without `RT:A4`, lines starting with
//     `COMM` are skipped. Blank lines are skipped.
//   - A value equal to `NULL=` (same text after trimming, or same number) is
//     read as NaN. A field of `*` only (Fortran overflow fill) is a null when
//     NULL= is itself `*`-fill, and otherwise follows ReadOptions::non_finite
//     like literal `nan`/`inf` text.
//   - Limits against corrupt definitions: at most 2048 numeric channels
//     (array elements counted), records of at most 4 Mi characters, repeat
//     counts up to 8192 and widths up to 65536 (fortran_format.h).
//   - The time channel is the one named `time` (case-insensitive) after
//     ReadOptions::rename (`--map time=FIDTIME`). It is always required.
//
// Writing
//   - `<stem>.dfn` and `<stem>.dat` (the stem is the path without a `.dfn` or
//     `.dat` extension of either case; upper-case extension given -> upper
//     case partner). Conventional layout: a `COMM` definition, then the data
//     definition starting with `RT:A4`; `.dat` lines start with `DATA`,
//     comments (WriteOptions::comment, wrapped at 76 characters) with `COMM`.
//     A channel named `RT` would clash with the record-type field: then the
//     data records are written without it.
//   - Every channel is defined as `E25.16` and written with the fewest
//     significant digits (at most 17) that read back to the same double
//     (std::to_chars shortest form, always with a decimal point): every
//     finite double round-trips bit for bit, including -0.0, subnormals
//     (3-digit exponents fit the width) and 1e300. NaN is written as the
//     null value kGdf2DefaultNull; infinities as `Inf`/`-Inf` (read back under
//     ReadOptions::non_finite). A finite value equal to the null value
//     (-1e100) cannot be represented: Write throws std::runtime_error.
//   - The time channel (named `time`, case-insensitive) is written first; the
//     other channels keep their order and their names as given. Units and
//     long names go to UNIT= and NAME=; the characters `,;:` (which would end
//     the attribute) are replaced by spaces there. A channel name that GDF2
//     cannot carry (empty, or containing a space or one of `,;:=`) is an
//     InputError naming it.

#include <cstddef>
#include <exception>
#include <istream>
#include <memory>
#include <ostream>
#include <string>
#include <vector>

#include "io/recording.h"
#include "io/table.h"

namespace fluxtrim::io {

// The NULL= text the writer puts on every field (as a double: -1e100).
inline constexpr const char* kGdf2DefaultNull = "-9.9999999999999999E+99";

// One field of a record definition, as parsed from the .dfn.
struct Gdf2Field {
  std::string name;       // as written in the .dfn
  char kind = 'F';        // 'A', 'I', 'F' or 'E' (D and G are read as E)
  int repeat = 1;         // > 1: array field, channels name_0..name_{r-1}
  int width = 0;          // characters per element
  int decimals = 0;       // d of Fw.d / Ew.d; 0 for A and I
  std::string unit;       // UNIT= / UNITS=
  std::string long_name;  // NAME=
  std::string null_text;  // NULL= as written, trimmed; empty when absent
  std::string comment;    // free-text attributes, joined by "; "
  std::size_t column = 0;    // 0-based offset of the first element in a line
  std::size_t dfn_line = 0;  // 1-based line of the .dfn that defined it
};

// The parsed .dfn: the data record and what else was defined.
struct Gdf2Definition {
  std::vector<Gdf2Field> fields;  // data record fields in column order,
                                  // including a leading RT:A4 when present
  bool has_record_type = false;   // data record starts with RT:A4
  std::size_t record_width = 0;   // characters of one data record
  std::vector<std::string> other_record_types;  // e.g. "COMM"
};

// Parses a .dfn. Throws InputError naming dfn_name, line and column.
Gdf2Definition ParseGdf2Definition(std::istream& dfn,
                                   const std::string& dfn_name);

// Chunked reader of a .dfn/.dat pair.
class Gdf2Reader : public RecordingReader {
 public:
  // Reads from two streams that outlive the reader; the names are used in
  // error messages only (the fuzzer and tests use this form).
  Gdf2Reader(std::istream& dfn, const std::string& dfn_name, std::istream& dat,
             const std::string& dat_name, const ReadOptions& options);
  // Opens the files itself.
  Gdf2Reader(const std::string& dfn_path, const std::string& dat_path,
             const ReadOptions& options);
  ~Gdf2Reader() override;

  const std::vector<ChannelInfo>& channels() const override;
  std::size_t ReadChunk(Table* chunk, std::size_t max_rows) override;
  // The .dat path (or the .dat name given with streams).
  const std::string& path() const override;

  const Gdf2Definition& definition() const;
  // Text (A-format) fields that are not part of the numeric table.
  const std::vector<std::string>& skipped_text_fields() const;
  // Number of .dat lines skipped as comments or other record types.
  std::size_t skipped_lines() const;

  struct Impl;

 private:
  std::unique_ptr<Impl> impl_;
};

// path may name the .dfn or the .dat; the partner is found by replacing the
// extension (same case first, then the other case). Throws InputError when
// either file is missing or the definition is bad.
std::unique_ptr<RecordingReader> OpenGdf2Reader(const std::string& path,
                                                const ReadOptions& options);

// Writes both the .dfn and the .dat (see the file comment for the layout).
// Throws InputError for a channel name GDF2 cannot carry, std::runtime_error
// when a file cannot be created.
std::unique_ptr<RecordingWriter> CreateGdf2Writer(
    const std::string& path, const std::vector<ChannelInfo>& schema,
    const WriteOptions& options);

// The same on two streams that outlive the writer (tests, fuzzer). The .dfn
// is complete when this returns; Close() flushes dat.
std::unique_ptr<RecordingWriter> CreateGdf2Writer(
    std::ostream& dfn, std::ostream& dat,
    const std::vector<ChannelInfo>& schema, const WriteOptions& options);

}  // namespace fluxtrim::io
