#include "gyre/core/suggest.hpp"

#include <algorithm>
#include <limits>

namespace gyre {

std::size_t edit_distance(std::string_view a, std::string_view b) {
  // Three rows of the dynamic-programming table (Damerau's restricted form: a transposed pair
  // counts as one edit, and no substring is edited twice).
  const std::size_t n = b.size();
  std::vector<std::size_t> before(n + 1), prev(n + 1), cur(n + 1);
  for (std::size_t j = 0; j <= n; ++j) prev[j] = j;
  for (std::size_t i = 1; i <= a.size(); ++i) {
    cur[0] = i;
    for (std::size_t j = 1; j <= n; ++j) {
      const std::size_t cost = a[i - 1] == b[j - 1] ? 0 : 1;
      cur[j] = std::min({prev[j] + 1, cur[j - 1] + 1, prev[j - 1] + cost});
      if (i > 1 && j > 1 && a[i - 1] == b[j - 2] && a[i - 2] == b[j - 1])
        cur[j] = std::min(cur[j], before[j - 2] + 1);
    }
    std::swap(before, prev);
    std::swap(prev, cur);
  }
  return prev[n];
}

std::optional<std::string> closest_match(std::string_view given, const std::vector<std::string>& candidates) {
  const std::size_t limit = std::max<std::size_t>(1, given.size() / 3);
  std::size_t best = std::numeric_limits<std::size_t>::max();
  const std::string* found = nullptr;
  for (const auto& c : candidates) {
    const std::size_t d = edit_distance(given, c);
    if (d < best) {
      best = d;
      found = &c;
    }
  }
  if (found != nullptr && best <= limit && best < given.size()) return *found;
  // A unique candidate that starts with what was typed ("--hidden" -> "--hidden-size").
  const std::string* prefixed = nullptr;
  for (const auto& c : candidates) {
    if (given.size() >= 3 && c.size() > given.size() && c.compare(0, given.size(), given) == 0) {
      if (prefixed != nullptr) return std::nullopt;
      prefixed = &c;
    }
  }
  if (prefixed != nullptr) return *prefixed;
  return std::nullopt;
}

std::string did_you_mean(std::string_view given, const std::vector<std::string>& candidates) {
  const auto m = closest_match(given, candidates);
  return m ? "; did you mean '" + *m + "'?" : std::string();
}

}  // namespace gyre
