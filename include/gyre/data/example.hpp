#pragma once
// One labelled example as read from a corpus file (before tokenization).

#include <cstddef>
#include <string>
#include <vector>

namespace gyre::data {

struct Example {
  /// Classification: the text. Tagging: the tokens joined by single spaces.
  std::string text;
  /// Classification: one label, or several for multi-label JSON Lines ("labels": [...]).
  std::vector<std::string> labels;
  /// Tagging only: the given tokens (not re-tokenized) and one tag per token.
  std::vector<std::string> tokens;
  std::vector<std::string> tags;
  /// 1-based line in the file where the example starts.
  std::size_t line = 0;
};

}  // namespace gyre::data
