#include "gyre/data/tag_scheme.hpp"

#include <algorithm>
#include <cctype>
#include <string>

#include "gyre/core/error.hpp"

namespace gyre::data {
namespace {

bool opens_or_continues(char prefix) {
  return prefix == 'B' || prefix == 'I';
}

// CoNLL-2000 evaluation script chunk rules (see the header): does a span that is open at the
// previous tag end before the current one?
bool span_ends(char prev, std::string_view prev_type, char cur, std::string_view cur_type) {
  if (prev == 'O') return false;
  if (prev == 'E' || prev == 'S') return true;
  // prev is B or I
  if (cur == 'B' || cur == 'S' || cur == 'O') return true;
  return prev_type != cur_type;
}

// ... and does a span start at the current tag?
bool span_starts(char prev, std::string_view prev_type, char cur, std::string_view cur_type) {
  if (cur == 'O') return false;
  if (cur == 'B' || cur == 'S') return true;
  // cur is I or E
  if (prev == 'O' || prev == 'E' || prev == 'S') return true;
  return prev_type != cur_type;
}

std::string at(std::size_t i) {
  return "position " + std::to_string(i);
}

// Why the transition prev -> cur is invalid in the scheme, or "" if it is valid. prev_prefix 0
// stands for the sentence start.
std::string transition_problem(char prev, std::string_view prev_type, std::string_view prev_tag, char cur,
                               std::string_view cur_type, std::string_view cur_tag, TagScheme scheme) {
  const bool inside_same = opens_or_continues(prev) && prev_type == cur_type;
  if (cur == 'I' || cur == 'E') {
    if (!inside_same) {
      const std::string begin = "B-" + std::string(cur_type);
      if (prev == 0)
        return std::string(cur_tag) + " at the sentence start; a span of type " + std::string(cur_type) +
               " must start with " + begin +
               (scheme == TagScheme::kBioes && cur == 'E' ? " or be S-" + std::string(cur_type) : "");
      return std::string(cur_tag) + " follows " + std::string(prev_tag) + "; a span of type " +
             std::string(cur_type) + " must start with " + begin;
    }
    return "";
  }
  if (scheme == TagScheme::kBioes && opens_or_continues(prev))
    return std::string(prev_tag) + " is followed by " + std::string(cur_tag) + "; the span of type " +
           std::string(prev_type) + " must go on with I-" + std::string(prev_type) + " or end with E-" +
           std::string(prev_type);
  return "";
}

}  // namespace

TagScheme parse_tag_scheme(std::string_view text) {
  std::string lower(text);
  for (char& c : lower) c = static_cast<char>(std::tolower(static_cast<unsigned char>(c)));
  if (lower == "bio") return TagScheme::kBio;
  if (lower == "bioes") return TagScheme::kBioes;
  throw ConfigError("tag_scheme", "unknown tag scheme '" + std::string(text) + "' (expected bio or bioes)");
}

TagScheme infer_tag_scheme(std::span<const std::string> tag_names) {
  TagScheme scheme = TagScheme::kBio;
  for (const auto& name : tag_names) {
    const TagParts parts = split_tag(name);
    if (parts.prefix == 'E' || parts.prefix == 'S') scheme = TagScheme::kBioes;
  }
  return scheme;
}

TagParts split_tag(std::string_view tag) {
  if (tag == "O") return {'O', {}};
  if (tag.size() >= 3 && tag[1] == '-' && (tag[0] == 'B' || tag[0] == 'I' || tag[0] == 'E' || tag[0] == 'S'))
    return {tag[0], tag.substr(2)};
  throw Error("malformed tag '" + std::string(tag) + "' (expected O or B-, I-, E-, S- followed by a type)");
}

bool tag_in_scheme(std::string_view tag, TagScheme scheme) noexcept {
  if (scheme == TagScheme::kNone) return false;
  if (tag == "O") return true;
  if (tag.size() < 3 || tag[1] != '-') return false;
  switch (tag[0]) {
    case 'B':
    case 'I':
      return true;
    case 'E':
    case 'S':
      return scheme == TagScheme::kBioes;
    default:
      return false;
  }
}

std::vector<TypedSpan> extract_spans(std::span<const std::string> tags) {
  std::vector<TypedSpan> spans;
  char prev = 'O';
  std::string_view prev_type;
  bool open = false;
  for (std::size_t i = 0; i < tags.size(); ++i) {
    TagParts cur;
    try {
      cur = split_tag(tags[i]);
    } catch (const Error& e) {
      throw Error(at(i) + ": " + e.what());
    }
    if (open && span_ends(prev, prev_type, cur.prefix, cur.type)) {
      spans.back().end = i;
      open = false;
    }
    if (span_starts(prev, prev_type, cur.prefix, cur.type)) {
      // The rules above never start a span while one stays open (a start implies an end).
      spans.push_back(TypedSpan{std::string(cur.type), i, i + 1});
      open = true;
    }
    prev = cur.prefix;
    prev_type = cur.type;
  }
  if (open) spans.back().end = tags.size();
  return spans;
}

std::vector<std::string> encode_spans(std::span<const TypedSpan> spans, std::size_t length,
                                      TagScheme scheme) {
  GYRE_CHECK(scheme != TagScheme::kNone, "encode_spans needs the bio or bioes scheme");
  std::vector<std::string> tags(length, "O");
  std::size_t next_free = 0;
  for (const auto& s : spans) {
    GYRE_CHECK(!s.type.empty(), "span without a type");
    GYRE_CHECK(s.begin < s.end && s.end <= length,
               "span [" + std::to_string(s.begin) + ", " + std::to_string(s.end) + ") of type " + s.type +
                   " is empty or outside a sentence of " + std::to_string(length) + " tokens");
    GYRE_CHECK(s.begin >= next_free, "spans overlap or are not sorted at token " + std::to_string(s.begin));
    next_free = s.end;
    if (scheme == TagScheme::kBioes && s.end - s.begin == 1) {
      tags[s.begin] = "S-" + s.type;
      continue;
    }
    tags[s.begin] = "B-" + s.type;
    for (std::size_t t = s.begin + 1; t < s.end; ++t) tags[t] = "I-" + s.type;
    if (scheme == TagScheme::kBioes) tags[s.end - 1] = "E-" + s.type;
  }
  return tags;
}

std::vector<TagIssue> check_tags(std::span<const std::string> tags, TagScheme scheme) {
  GYRE_CHECK(scheme != TagScheme::kNone, "check_tags needs the bio or bioes scheme");
  std::vector<TagIssue> issues;
  char prev = 0;  // 0 = sentence start (or after a malformed tag: treated like a fresh start)
  std::string_view prev_type, prev_tag;
  for (std::size_t i = 0; i < tags.size(); ++i) {
    TagParts cur;
    try {
      cur = split_tag(tags[i]);
    } catch (const Error& e) {
      issues.push_back({i, e.what()});
      prev = 0;
      continue;
    }
    if (!tag_in_scheme(tags[i], scheme)) {
      issues.push_back({i, "'" + tags[i] + "' is not a " +
                               std::string(scheme == TagScheme::kBio ? "BIO" : "BIOES") +
                               " tag (BIO has only B-, I- and O)"});
      prev = 0;
      continue;
    }
    std::string problem =
        transition_problem(prev, prev_type, prev_tag, cur.prefix, cur.type, tags[i], scheme);
    if (!problem.empty()) issues.push_back({i, std::move(problem)});
    prev = cur.prefix;
    prev_type = cur.type;
    prev_tag = tags[i];
  }
  if (scheme == TagScheme::kBioes && !tags.empty() && opens_or_continues(prev))
    issues.push_back({tags.size() - 1, "the sentence ends on " + std::string(prev_tag) +
                                           "; the span of type " + std::string(prev_type) +
                                           " must end with E-" + std::string(prev_type) +
                                           (prev == 'B' ? " or be S-" + std::string(prev_type) : "")});
  return issues;
}

std::vector<std::string> repair_tags(std::span<const std::string> tags, TagScheme scheme) {
  const std::vector<TypedSpan> spans = extract_spans(tags);
  return encode_spans(spans, tags.size(), scheme);
}

std::vector<std::string> convert_tags(std::span<const std::string> tags, TagScheme to) {
  return repair_tags(tags, to);
}

TransitionRules transition_rules(std::span<const std::string> tag_names, TagScheme scheme) {
  const std::size_t n = tag_names.size();
  GYRE_CHECK(n > 0, "transition rules need at least one tag");
  GYRE_CHECK(scheme != TagScheme::kNone, "transition rules need the bio or bioes scheme");
  std::vector<TagParts> parts(n);
  for (std::size_t i = 0; i < n; ++i) {
    parts[i] = split_tag(tag_names[i]);
    if (!tag_in_scheme(tag_names[i], scheme))
      throw Error("tag '" + tag_names[i] + "' is not part of the " + std::string(to_string(scheme)) +
                  " scheme");
  }
  TransitionRules r;
  r.num_tags = n;
  r.allowed.assign(n * n, 0);
  r.start.assign(n, 0);
  r.end.assign(n, 0);
  for (std::size_t j = 0; j < n; ++j) {
    r.start[j] = transition_problem(0, {}, {}, parts[j].prefix, parts[j].type, tag_names[j], scheme).empty();
    r.end[j] = scheme == TagScheme::kBio || !opens_or_continues(parts[j].prefix);
    for (std::size_t i = 0; i < n; ++i)
      r.allowed[i * n + j] = transition_problem(parts[i].prefix, parts[i].type, tag_names[i], parts[j].prefix,
                                                parts[j].type, tag_names[j], scheme)
                                 .empty();
  }
  return r;
}

}  // namespace gyre::data
