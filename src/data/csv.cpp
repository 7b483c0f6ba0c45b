#include "gyre/data/csv.hpp"

#include "gyre/core/error.hpp"
#include "gyre/core/suggest.hpp"

namespace gyre::data {
namespace {
constexpr int kEof = std::char_traits<char>::eof();
}  // namespace

CsvReader::CsvReader(std::istream& in, std::string name) : in_(*in.rdbuf()), name_(std::move(name)) {}

int CsvReader::get() {
  const int c = in_.sbumpc();
  if (c == std::char_traits<char>::eof()) return c;
  if (c == '\n') {
    ++line_;
    column_ = 1;
  } else {
    ++column_;
  }
  return c;
}

int CsvReader::peek() {
  return in_.sgetc();
}

void CsvReader::fail(std::size_t line, std::size_t column, const std::string& what) const {
  throw ParseError(name_, line, "column " + std::to_string(column) + ": " + what);
}

// A UTF-8 byte-order mark (EF BB BF) at the start of the input is skipped.
void CsvReader::skip_byte_order_mark() {
  if (peek() != 0xEF) return;
  get();
  if (peek() != 0xBB || (get(), peek() != 0xBF)) fail(1, 1, "invalid UTF-8 at the start of the file");
  get();
  column_ = 1;
}

// Blank lines between records are skipped ("\n", "\r\n" or a lone "\r"); false at the end of the
// input.
bool CsvReader::skip_blank_lines() {
  for (;;) {
    const int c = peek();
    if (c == kEof) return false;
    if (c == '\n') {
      get();
    } else if (c == '\r') {
      get();
      if (peek() == '\n') get();
      if (column_ != 1) {  // a lone CR ends a line too
        ++line_;
        column_ = 1;
      }
    } else {
      return true;
    }
  }
}

void CsvReader::append(std::string& field, int c) {
  if (++record_bytes_ > kMaxRecordBytes)
    fail(record_line_, 1,
         "record longer than " + std::to_string(kMaxRecordBytes >> 20) +
             " MiB (is a quoted field missing its closing quote?)");
  field.push_back(static_cast<char>(c));
}

// A quoted field from its opening quote (at line `line`, column `column`) to its closing one; returns
// the character after it, which must end the field.
int CsvReader::read_quoted(std::string& field, std::size_t line, std::size_t column) {
  get();
  for (;;) {
    const int c = get();
    if (c == kEof)
      fail(line, column, "quoted field is never closed (no closing quote before the end of the file)");
    if (c == '"') {
      if (peek() != '"') break;
      get();
    }
    append(field, c);
  }
  const int c = peek();
  if (c != ',' && c != '\n' && c != '\r' && c != kEof)
    fail(line_, column_,
         "text after the closing quote of a quoted field (a quote inside a quoted field is written "
         "twice: \"\")");
  return c;
}

// An unquoted field, up to the character that ends it (returned, not consumed).
int CsvReader::read_plain(std::string& field) {
  int c = peek();
  while (c != ',' && c != '\n' && c != '\r' && c != kEof) {
    append(field, get());
    c = peek();
  }
  return c;
}

// The end of the record at `c`: CRLF, LF, a lone CR, or the end of the file.
void CsvReader::end_record(int c) {
  if (c == '\r') {
    get();
    if (peek() == '\n') {
      get();
    } else {
      ++line_;
      column_ = 1;
    }
  } else if (c == '\n') {
    get();
  }
}

bool CsvReader::next(std::vector<std::string>& fields) {
  fields.clear();
  field_lines_.clear();
  field_columns_.clear();
  if (!started_) {
    started_ = true;
    skip_byte_order_mark();
  }
  if (!skip_blank_lines()) return false;
  record_line_ = line_;
  record_bytes_ = 0;
  for (;;) {
    std::string field;
    const std::size_t field_line = line_, field_column = column_;
    const int c = peek() == '"' ? read_quoted(field, field_line, field_column) : read_plain(field);
    fields.push_back(std::move(field));
    field_lines_.push_back(field_line);
    field_columns_.push_back(field_column);
    if (c != ',') {
      end_record(c);
      return true;
    }
    get();
  }
}

std::size_t csv_column(const std::vector<std::string>& header, std::string_view name, std::string_view option,
                       const std::string& path, std::size_t line) {
  std::size_t found = header.size();
  for (std::size_t i = 0; i < header.size(); ++i) {
    if (header[i] != name) continue;
    if (found != header.size())
      throw ParseError(path, line, "two columns are named '" + std::string(name) + "' in the header");
    found = i;
  }
  if (found != header.size()) return found;
  std::string columns;
  for (const auto& h : header) columns += (columns.empty() ? "" : ", ") + h;
  throw ParseError(path, line,
                   "no column named '" + std::string(name) + "' in the header (columns: " + columns + ")" +
                       did_you_mean(name, header) + "; choose the column with " + std::string(option) +
                       " NAME");
}

}  // namespace gyre::data
