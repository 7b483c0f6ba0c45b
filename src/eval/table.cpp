#include <algorithm>
#include <cstdio>
#include <string>

#include "eval/detail/table.hpp"

namespace gyre::eval::detail {

TextTable::TextTable(std::vector<std::string> header) : header_(std::move(header)) {}

void TextTable::add_row(std::vector<std::string> cells) {
  cells.resize(std::max(cells.size(), header_.size()));
  if (cells.empty()) cells.emplace_back();
  rows_.push_back(std::move(cells));
}

void TextTable::add_rule() {
  rows_.emplace_back();
}

std::string TextTable::render() const {
  std::vector<std::size_t> width(header_.size(), 0);
  for (std::size_t c = 0; c < header_.size(); ++c) width[c] = header_[c].size();
  for (const auto& row : rows_)
    for (std::size_t c = 0; c < row.size() && c < width.size(); ++c)
      width[c] = std::max(width[c], row[c].size());
  std::size_t total = 0;
  for (std::size_t w : width) total += w;
  total += width.empty() ? 0 : 2 * (width.size() - 1);

  std::string out;
  auto emit = [&](const std::vector<std::string>& row) {
    std::string line;
    for (std::size_t c = 0; c < width.size(); ++c) {
      const std::string& cell = c < row.size() ? row[c] : std::string();
      if (c > 0) line += "  ";
      const std::string pad(width[c] - std::min(width[c], cell.size()), ' ');
      line += c == 0 ? cell + pad : pad + cell;
    }
    while (!line.empty() && line.back() == ' ') line.pop_back();
    out += line;
    out += '\n';
  };
  emit(header_);
  out += std::string(total, '-') + '\n';
  for (const auto& row : rows_) {
    if (row.empty())
      out += std::string(total, '-') + '\n';
    else
      emit(row);
  }
  return out;
}

std::string fixed(double value, int decimals) {
  char buf[64];
  std::snprintf(buf, sizeof buf, "%.*f", std::clamp(decimals, 0, 17), value);
  return buf;
}

}  // namespace gyre::eval::detail
