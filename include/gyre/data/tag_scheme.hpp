#pragma once
// Tag schemes for span labelling (BIO and BIOES), span extraction, validation, repair and
// conversion.
//
// Tags are "O" or "<P>-<type>" with P one of B (begin), I (inside), E (end, BIOES only),
// S (single, BIOES only) and a non-empty type, e.g. "B-appliance". Anything else is malformed and
// throws gyre::Error naming the position.
//
// Reading a sequence into spans follows the chunk rules of the CoNLL-2000 shared-task evaluation
// script (Tjong Kim Sang & Buchholz 2000), which read both schemes and never reject input:
//  - a span starts at B-x or S-x; at I-x or E-x that follows O, E-*, S-* or the sentence start;
//    and at any typed tag whose type differs from the previous tag's type. So "O I-x" starts a
//    span at the I-x, and "B-x I-y" is two spans, x then y.
//  - a span ends before O, B-*, S-*, before a tag of another type, after E-* and after S-*, and
//    at the sentence end.
// The same reading is used for scoring, for repair and for conversion, so repairing or converting
// a sequence never changes which spans it denotes.

#include <cstddef>
#include <cstdint>
#include <span>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/runtime/model_header.hpp"

namespace gyre::data {

/// The runtime's enum (one set of enums, gyre/runtime/model_header.hpp): kBio, kBioes, and
/// kNone for a tagger whose labels are plain types. to_string(TagScheme) gives "bio", "bioes",
/// "none". The functions below that take a scheme need kBio or kBioes (gyre::Error otherwise).
using TagScheme = runtime::TagScheme;
using runtime::to_string;

/// Parses "bio" or "bioes" (case-insensitive); throws gyre::ConfigError("tag_scheme", ...) otherwise.
TagScheme parse_tag_scheme(std::string_view text);

/// The scheme a tag set is written in: BIOES if any tag starts with E- or S-, else BIO.
/// Throws gyre::Error naming the first malformed tag.
TagScheme infer_tag_scheme(std::span<const std::string> tag_names);

/// A tag split into its prefix letter ('O', 'B', 'I', 'E' or 'S') and type ("" for O).
/// type views into the string the tag was split from.
struct TagParts {
  char prefix = 'O';
  std::string_view type;
};

/// Splits a tag; throws gyre::Error("malformed tag '...'") if it is neither "O" nor
/// "<B|I|E|S>-<non-empty type>".
TagParts split_tag(std::string_view tag);
/// True if the tag is well-formed and its prefix belongs to the scheme (BIO has no E or S; kNone
/// has no prefixes, so false).
bool tag_in_scheme(std::string_view tag, TagScheme scheme) noexcept;

/// A labelled span of tokens [begin, end) within one sentence.
struct TypedSpan {
  std::string type;
  std::size_t begin = 0;
  std::size_t end = 0;
  bool operator==(const TypedSpan&) const = default;
};

/// Spans of a tag sequence under the CoNLL-2000 reading above, in order of position. Accepts any
/// well-formed tags of either scheme; throws gyre::Error (naming the position) on a malformed tag.
std::vector<TypedSpan> extract_spans(std::span<const std::string> tags);

/// Writes spans as tags of a sentence of `length` tokens in the given scheme. Spans must be
/// non-empty, inside the sentence, sorted and non-overlapping (throws gyre::Error otherwise).
std::vector<std::string> encode_spans(std::span<const TypedSpan> spans, std::size_t length, TagScheme scheme);

/// One invalid tag or transition in a sentence. position is the 0-based token index (for an
/// unfinished span at the sentence end: the index of the last token). The caller adds file:line.
struct TagIssue {
  std::size_t position = 0;
  std::string message;  // e.g. "I-part follows O; a span of type part must start with B-part"
};

/// Reports every malformed tag, tag outside the scheme (E-/S- in BIO) and invalid transition:
///  BIO:   I-x is valid only after B-x or I-x.
///  BIOES: I-x and E-x only after B-x or I-x; after B-x or I-x only I-x or E-x may follow; a
///         sentence may not end on B-x or I-x.
/// Empty result = the sequence is valid.
std::vector<TagIssue> check_tags(std::span<const std::string> tags, TagScheme scheme);

/// Repair rule: read the spans with the CoNLL-2000 convention above and write them back in the
/// scheme. Effects in BIO: "O I-x" -> "O B-x", "B-x I-y" -> "B-x B-y"; in BIOES additionally an
/// unfinished "B-x I-x O" -> "B-x E-x O" and a lone "B-x O" -> "S-x O". Malformed tags throw.
/// The result passes check_tags() and denotes the same spans.
std::vector<std::string> repair_tags(std::span<const std::string> tags, TagScheme scheme);

/// Converts a sequence (either scheme, read with the convention above) to `to`:
/// BIO -> BIOES turns a single-token span's B-x into S-x and a span's last I-x into E-x;
/// BIOES -> BIO turns S-x into B-x and E-x into I-x.
std::vector<std::string> convert_tags(std::span<const std::string> tags, TagScheme to);

/// Which tag-to-tag transitions are valid in a scheme, for constrained CRF decoding/training.
/// All vectors hold 1 (allowed) or 0 (forbidden). Malformed names or names outside the scheme
/// throw gyre::Error.
struct TransitionRules {
  std::size_t num_tags = 0;
  std::vector<std::uint8_t> allowed;  // [T x T] row-major: (i, j) = tag i may be followed by tag j
  std::vector<std::uint8_t> start;    // [T]: tag may begin a sentence
  std::vector<std::uint8_t> end;      // [T]: tag may end a sentence
};
TransitionRules transition_rules(std::span<const std::string> tag_names, TagScheme scheme);

}  // namespace gyre::data
