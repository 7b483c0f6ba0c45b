#include "gyre/data/encoded_corpus.hpp"

#include "gyre/core/error.hpp"

namespace gyre::data {

EncodedCorpus::EncodedCorpus(std::span<const EncodedExample> examples) {
  for (const auto& ex : examples) add(ex);
}

void EncodedCorpus::add(const EncodedExample& example) {
  GYRE_CHECK(!example.ids.empty(), "an encoded example has no tokens");
  const bool chars = !example.char_offsets.empty();
  GYRE_CHECK(empty() || chars == has_characters(),
             "encoded examples with and without characters cannot share a corpus");
  if (chars) {
    GYRE_CHECK(example.char_offsets.size() == example.ids.size() + 1 && example.char_offsets.front() == 0 &&
                   static_cast<std::size_t>(example.char_offsets.back()) == example.char_ids.size(),
               "an encoded example's character offsets do not match its tokens");
    for (std::size_t t = 0; t + 1 < example.char_offsets.size(); ++t)
      GYRE_CHECK(example.char_offsets[t] <= example.char_offsets[t + 1],
                 "an encoded example's character offsets decrease");
    if (char_start_.empty()) char_start_.push_back(0);
    const std::size_t base = char_ids_.size();
    char_ids_.insert(char_ids_.end(), example.char_ids.begin(), example.char_ids.end());
    for (std::size_t t = 1; t < example.char_offsets.size(); ++t)
      char_start_.push_back(base + static_cast<std::size_t>(example.char_offsets[t]));
  }
  ids_.insert(ids_.end(), example.ids.begin(), example.ids.end());
  id_start_.push_back(ids_.size());
  targets_.insert(targets_.end(), example.targets.begin(), example.targets.end());
  target_start_.push_back(targets_.size());
  lines_.push_back(example.source_line);
  cut_.push_back(example.cut);
}

void EncodedCorpus::reserve(std::size_t examples, std::size_t tokens, std::size_t targets) {
  ids_.reserve(ids_.size() + tokens);
  id_start_.reserve(id_start_.size() + examples);
  targets_.reserve(targets_.size() + targets);
  target_start_.reserve(target_start_.size() + examples);
  lines_.reserve(lines_.size() + examples);
  cut_.reserve(cut_.size() + examples);
}

std::span<const std::int32_t> EncodedCorpus::ids(std::size_t i) const {
  GYRE_CHECK(i < size(), "example index out of range");
  return std::span<const std::int32_t>(ids_).subspan(id_start_[i], id_start_[i + 1] - id_start_[i]);
}

std::span<const std::int32_t> EncodedCorpus::targets(std::size_t i) const {
  GYRE_CHECK(i < size(), "example index out of range");
  return std::span<const std::int32_t>(targets_).subspan(target_start_[i],
                                                         target_start_[i + 1] - target_start_[i]);
}

std::size_t EncodedCorpus::source_line(std::size_t i) const {
  GYRE_CHECK(i < size(), "example index out of range");
  return lines_[i];
}

bool EncodedCorpus::cut(std::size_t i) const {
  GYRE_CHECK(i < size(), "example index out of range");
  return cut_[i];
}

std::span<const std::int32_t> EncodedCorpus::char_ids(std::size_t i, std::size_t t) const {
  GYRE_CHECK(has_characters(), "the corpus has no characters");
  GYRE_CHECK(i < size() && t < id_start_[i + 1] - id_start_[i], "token index out of range");
  const std::size_t k = id_start_[i] + t;
  return std::span<const std::int32_t>(char_ids_).subspan(char_start_[k],
                                                          char_start_[k + 1] - char_start_[k]);
}

std::span<const std::int32_t> EncodedCorpus::example_char_ids(std::size_t i) const {
  GYRE_CHECK(i < size(), "example index out of range");
  if (!has_characters()) return {};
  const std::size_t from = char_start_[id_start_[i]], to = char_start_[id_start_[i + 1]];
  return std::span<const std::int32_t>(char_ids_).subspan(from, to - from);
}

EncodedExample EncodedCorpus::example(std::size_t i) const {
  EncodedExample out;
  const auto id = ids(i);
  const auto target = targets(i);
  out.ids.assign(id.begin(), id.end());
  out.targets.assign(target.begin(), target.end());
  out.source_line = lines_[i];
  out.cut = cut_[i];
  if (has_characters()) {
    out.char_offsets.push_back(0);
    for (std::size_t t = 0; t < id.size(); ++t) {
      const auto chars = char_ids(i, t);
      out.char_ids.insert(out.char_ids.end(), chars.begin(), chars.end());
      out.char_offsets.push_back(static_cast<std::int32_t>(out.char_ids.size()));
    }
  }
  return out;
}

std::size_t EncodedCorpus::bytes() const noexcept {
  return (ids_.capacity() + targets_.capacity() + char_ids_.capacity()) * sizeof(std::int32_t) +
         (id_start_.capacity() + target_start_.capacity() + lines_.capacity() + char_start_.capacity()) *
             sizeof(std::size_t) +
         cut_.capacity() / 8;
}

void EncodedCorpus::shrink_to_fit() {
  ids_.shrink_to_fit();
  id_start_.shrink_to_fit();
  targets_.shrink_to_fit();
  target_start_.shrink_to_fit();
  lines_.shrink_to_fit();
  cut_.shrink_to_fit();
  char_ids_.shrink_to_fit();
  char_start_.shrink_to_fit();
}

}  // namespace gyre::data
