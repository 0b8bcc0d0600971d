// CsvReader: the records of a delimited text file (RFC 4180), one at a
// time, for `lyapcast import`. Records end at LF or CRLF; fields are
// separated by the delimiter (',' or ';' or a tab); a field that starts with
// '"' is quoted: it ends at the next '"' not doubled ("" stands for one '"')
// and may hold delimiters and line breaks. Beyond RFC 4180, spaces and tabs
// around a quoted field are dropped, a '"' inside an unquoted field is kept as
// text, and a UTF-8 byte order mark before the first record is skipped.
//
// A malformed record never stops the reader, and a stray quote costs one
// line: a quote that is not closed by the end of the input (or within
// `max_record` bytes), or that closes on a later line with text after it,
// makes the record's first line an error, and reading resumes at the line
// after it. Text after a closing quote on the record's own line makes that
// line an error. A caller that finds a record spanning lines invalid for its
// own reasons can give the later lines back (GiveBackContinuation).
// Single-threaded; reads the stream sequentially (stdin works).
#pragma once

#include <cstddef>
#include <cstdint>
#include <deque>
#include <istream>
#include <string>
#include <vector>

namespace lyapcast::cli {

struct CsvRecord {
  std::int64_t line = 0;            // the file line (1-based) the record starts on
  std::int64_t last_line = 0;       // the line it ends on (> line when a quoted field holds line breaks)
  std::vector<std::string> fields;  // as written, quotes removed; a blank line is one empty field
  std::string error;                // non-empty: malformed (says what and where); `fields` are then unusable
};

class CsvReader {
 public:
  // `delimiter` must not be '"', CR or LF. `max_record`: the longest record
  // (bytes) a quoted field may stretch over before it counts as not closed.
  explicit CsvReader(std::istream& in, char delimiter = ',', std::size_t max_record = std::size_t{1} << 20);

  // The next record; false at the end of the input.
  bool Next(CsvRecord& out);

  // After Next() returned a record spanning lines (last_line > line): the
  // lines after its first are read again by the following calls, so the
  // caller can reject just the first line. False when there are none.
  bool GiveBackContinuation();

  // Bytes consumed from the stream so far (for progress).
  std::uint64_t bytes_read() const { return bytes_read_; }

 private:
  struct Line {
    std::string text;  // without the line break
    std::int64_t number = 0;
  };
  bool ReadLine(Line& out);

  std::istream& in_;
  char delimiter_;
  std::size_t max_record_;
  std::int64_t lines_read_ = 0;
  std::uint64_t bytes_read_ = 0;
  std::deque<Line> pending_;        // lines given back, read before the stream
  std::vector<Line> continuation_;  // the last record's lines after its first
};

}  // namespace lyapcast::cli
