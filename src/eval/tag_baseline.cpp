#include "gyre/eval/tag_baseline.hpp"

#include "gyre/core/error.hpp"

namespace gyre::eval {
namespace {

// Index of the largest count; on a tie the tag whose name sorts first wins.
std::int32_t pick(const std::vector<std::int64_t>& counts, const std::vector<std::string>& names) {
  std::int32_t best = -1;
  for (std::size_t t = 0; t < counts.size(); ++t) {
    if (counts[t] == 0) continue;
    if (best < 0 || counts[t] > counts[static_cast<std::size_t>(best)] ||
        (counts[t] == counts[static_cast<std::size_t>(best)] &&
         names[t] < names[static_cast<std::size_t>(best)]))
      best = static_cast<std::int32_t>(t);
  }
  return best;
}

}  // namespace

void MostFrequentTagBaseline::add(std::span<const std::string> tokens, std::span<const std::string> tags) {
  GYRE_CHECK(tokens.size() == tags.size(), "baseline: sentence has " + std::to_string(tokens.size()) +
                                               " tokens but " + std::to_string(tags.size()) + " tags");
  finalized_ = false;
  for (std::size_t i = 0; i < tokens.size(); ++i) {
    auto [it, inserted] = tag_ids_.try_emplace(tags[i], static_cast<std::int32_t>(tag_names_.size()));
    if (inserted) {
      tag_names_.push_back(tags[i]);
      totals_.push_back(0);
    }
    const auto id = static_cast<std::size_t>(it->second);
    auto& c = counts_[tokens[i]];
    if (c.size() <= id) c.resize(id + 1, 0);
    c[id] += 1;
    totals_[id] += 1;
  }
}

void MostFrequentTagBaseline::finalize() {
  GYRE_CHECK(!tag_names_.empty(), "baseline: no training tokens were added");
  best_.clear();
  for (const auto& [token, c] : counts_) best_[token] = pick(c, tag_names_);
  default_tag_ = tag_names_[static_cast<std::size_t>(pick(totals_, tag_names_))];
  finalized_ = true;
}

std::vector<std::string> MostFrequentTagBaseline::predict(std::span<const std::string> tokens) const {
  GYRE_CHECK(finalized_, "baseline: predict() before finalize()");
  std::vector<std::string> out;
  out.reserve(tokens.size());
  for (const auto& tok : tokens) {
    const auto it = best_.find(tok);
    out.push_back(it == best_.end() ? default_tag_ : tag_names_[static_cast<std::size_t>(it->second)]);
  }
  return out;
}

}  // namespace gyre::eval
