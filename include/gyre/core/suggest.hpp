#pragma once
// "Did you mean ...?" for misspelt option names, setting keys and choice values.

#include <cstddef>
#include <optional>
#include <string>
#include <string_view>
#include <vector>

namespace gyre {

/// Optimal string alignment distance (Levenshtein plus transposition of two adjacent
/// characters), in bytes: "epoch" -> "epochs" is 1, "lstn" -> "lstm" is 1, "gur" -> "gru" is 1.
std::size_t edit_distance(std::string_view a, std::string_view b);

/// The candidate closest to `given`, when it is close enough to be a plausible typo: at most
/// max(1, given.size() / 3) edits, or `given` is a prefix of exactly one candidate. Ties go to
/// the earlier candidate.
std::optional<std::string> closest_match(std::string_view given, const std::vector<std::string>& candidates);

/// "; did you mean 'x'?" for closest_match, or "" when nothing is close.
std::string did_you_mean(std::string_view given, const std::vector<std::string>& candidates);

}  // namespace gyre
