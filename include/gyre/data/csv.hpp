#pragma once
// Comma-separated values as RFC 4180 defines them (https://www.rfc-editor.org/rfc/rfc4180):
// records end at CRLF or LF (a lone CR too, as Python's csv module reads them); a field may be
// enclosed in double quotes, and then holds commas, line breaks and quotes written twice ("").
// Like Python's csv module (strict=True, tests/fixtures/data/csv/ made by tools/make_csv_fixtures.py):
// a quote inside an unquoted field is an ordinary character; anything but a comma or the end of
// the record after a closing quote is an error, as is a quoted field still open at the end of the
// file. Blank lines are skipped; a UTF-8 byte-order mark at the start is dropped.

#include <cstddef>
#include <istream>
#include <string>
#include <string_view>
#include <vector>

namespace gyre::data {

class CsvReader {
 public:
  /// `name` is used in error messages (the file name).
  CsvReader(std::istream& in, std::string name);

  /// Reads the next record into `fields`; false at the end of the input. Throws
  /// gyre::ParseError(name, line, "column C: ...") on malformed quoting, and when a record is
  /// longer than kMaxRecordBytes (which stops an unterminated quote from swallowing the file).
  bool next(std::vector<std::string>& fields);
  /// 1-based line where the record last returned by next() starts.
  std::size_t line() const noexcept { return record_line_; }
  /// 1-based line where each field of that record starts, and its byte column.
  const std::vector<std::size_t>& field_lines() const noexcept { return field_lines_; }
  const std::vector<std::size_t>& field_columns() const noexcept { return field_columns_; }

  static constexpr std::size_t kMaxRecordBytes = std::size_t{16} << 20;

 private:
  int get();
  int peek();
  [[noreturn]] void fail(std::size_t line, std::size_t column, const std::string& what) const;
  void skip_byte_order_mark();
  bool skip_blank_lines();
  void append(std::string& field, int c);
  int read_quoted(std::string& field, std::size_t line, std::size_t column);
  int read_plain(std::string& field);
  void end_record(int c);

  std::streambuf& in_;
  std::string name_;
  std::size_t line_ = 1, column_ = 1;  // position of the next character
  std::size_t record_line_ = 0, record_bytes_ = 0;
  std::vector<std::size_t> field_lines_, field_columns_;
  bool started_ = false;
};

/// Index of the header column called `name`. Throws gyre::ParseError(path, line, ...) listing the
/// header's columns, with the closest name suggested, and naming the option that chooses it.
std::size_t csv_column(const std::vector<std::string>& header, std::string_view name, std::string_view option,
                       const std::string& path, std::size_t line);

}  // namespace gyre::data
