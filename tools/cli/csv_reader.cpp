#include "csv_reader.h"

#include <fmt/format.h>

#include <iterator>
#include <utility>

namespace lyapcast::cli {

CsvReader::CsvReader(std::istream& in, char delimiter, std::size_t max_record)
    : in_(in), delimiter_(delimiter), max_record_(max_record) {}

bool CsvReader::ReadLine(Line& out) {
  if (!pending_.empty()) {
    out = std::move(pending_.front());
    pending_.pop_front();
    return true;
  }
  if (!std::getline(in_, out.text)) return false;
  bytes_read_ += out.text.size() + (in_.eof() ? 0 : 1);
  out.number = ++lines_read_;
  if (out.number == 1 && out.text.compare(0, 3, "\xEF\xBB\xBF") == 0) out.text.erase(0, 3);  // UTF-8 BOM
  if (!out.text.empty() && out.text.back() == '\r') out.text.pop_back();
  return true;
}

bool CsvReader::GiveBackContinuation() {
  if (continuation_.empty()) return false;
  for (std::size_t k = continuation_.size(); k-- > 0;) pending_.push_front(std::move(continuation_[k]));
  continuation_.clear();
  return true;
}

bool CsvReader::Next(CsvRecord& out) {
  out.fields.clear();
  out.error.clear();
  continuation_.clear();
  std::vector<Line> lines(1);  // the record's lines: more than one when a quoted field holds a line break
  if (!ReadLine(lines[0])) return false;
  out.line = out.last_line = lines[0].number;

  enum class State { kStart, kUnquoted, kQuoted, kAfterQuote };
  State state = State::kStart;
  std::string field;
  std::size_t record_bytes = lines[0].text.size();
  std::size_t at = 0;  // position in the current (last) line
  const auto blank = [&](char c) { return (c == ' ' || c == '\t') && c != delimiter_; };
  // An error ends the record; when it spans lines, only its first line is
  // spent (a stray quote), the others are read again.
  const auto fail = [&](std::string message) {
    out.fields.clear();
    out.error = std::move(message);
    for (std::size_t k = lines.size(); k-- > 1;) pending_.push_front(std::move(lines[k]));
    out.last_line = out.line;
    return true;
  };
  const auto done = [&] {
    out.fields.push_back(std::move(field));
    continuation_.assign(std::make_move_iterator(lines.begin() + 1), std::make_move_iterator(lines.end()));
    return true;
  };

  while (true) {
    const std::string& text = lines.back().text;
    if (at == text.size()) {  // end of a line
      if (state != State::kQuoted) return done();
      Line next;
      if (record_bytes > max_record_ || !ReadLine(next)) {
        return fail(fmt::format("field {} opens a quote ('\"') that is not closed {}", out.fields.size() + 1,
                                record_bytes > max_record_ ? fmt::format("within {} bytes", max_record_)
                                                           : std::string("by the end of the file")));
      }
      field += '\n';
      record_bytes += next.text.size() + 1;
      out.last_line = next.number;
      lines.push_back(std::move(next));
      at = 0;
      continue;
    }
    const char c = text[at++];
    switch (state) {
      case State::kStart:
        if (c == delimiter_) {
          out.fields.push_back(std::move(field));
          field.clear();
        } else if (c == '"') {
          field.clear();  // blanks before an opening quote
          state = State::kQuoted;
        } else {
          field += c;
          if (!blank(c)) state = State::kUnquoted;
        }
        break;
      case State::kUnquoted:
        if (c == delimiter_) {
          out.fields.push_back(std::move(field));
          field.clear();
          state = State::kStart;
        } else {
          field += c;
        }
        break;
      case State::kQuoted:
        if (c != '"') {
          field += c;
        } else if (at < text.size() && text[at] == '"') {
          field += '"';
          ++at;
        } else {
          state = State::kAfterQuote;
        }
        break;
      case State::kAfterQuote:
        if (c == delimiter_) {
          out.fields.push_back(std::move(field));
          field.clear();
          state = State::kStart;
        } else if (!blank(c) && lines.size() > 1) {
          return fail(
              fmt::format("field {} opens a quote ('\"') that closes on line {} with text after it "
                          "(a quote not closed?)",
                          out.fields.size() + 1, lines.back().number));
        } else if (!blank(c)) {
          return fail(
              fmt::format("text after the closing quote of field {} (a '\"' inside a quoted field is "
                          "written '\"\"')",
                          out.fields.size() + 1));
        }
        break;
    }
  }
}

}  // namespace lyapcast::cli
