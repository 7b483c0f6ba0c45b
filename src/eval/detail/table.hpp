#pragma once
// Aligned plain-text tables for the metric reports: first column left-aligned, the others
// right-aligned, two spaces between columns, a dashed rule under the header and where asked.

#include <string>
#include <vector>

namespace gyre::eval::detail {

class TextTable {
 public:
  explicit TextTable(std::vector<std::string> header);
  /// Rows shorter than the header are padded with empty cells.
  void add_row(std::vector<std::string> cells);
  void add_rule();
  std::string render() const;

 private:
  std::vector<std::string> header_;
  std::vector<std::vector<std::string>> rows_;  // an empty row = rule
};

/// Fixed-point text with the given number of decimals ("0.8571").
std::string fixed(double value, int decimals);

}  // namespace gyre::eval::detail
