#include "gyre/train/label_next.hpp"

#include <algorithm>
#include <cmath>
#include <limits>
#include <map>
#include <numeric>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"

namespace gyre::train {

const char* to_string(PickRule r) noexcept {
  switch (r) {
    case PickRule::kDiverse:
      return "diverse";
    case PickRule::kUncertain:
      return "uncertain";
    case PickRule::kRandom:
      return "random";
  }
  return "?";
}

const char* to_string(Uncertainty u) noexcept {
  return u == Uncertainty::kMargin ? "margin" : "entropy";
}

PickRule pick_rule_from_string(std::string_view name) {
  for (const auto r : {PickRule::kDiverse, PickRule::kUncertain, PickRule::kRandom})
    if (name == to_string(r)) return r;
  throw ConfigError("pick", "'" + std::string(name) + "' is not one of diverse, uncertain, random");
}

Uncertainty uncertainty_from_string(std::string_view name) {
  for (const auto u : {Uncertainty::kMargin, Uncertainty::kEntropy})
    if (name == to_string(u)) return u;
  throw ConfigError("uncertainty", "'" + std::string(name) + "' is not one of margin, entropy");
}

double uncertainty(std::span<const float> probs, bool multi_label, Uncertainty measure) {
  GYRE_CHECK(!probs.empty(), "uncertainty of an empty distribution");
  if (multi_label) {
    if (measure == Uncertainty::kMargin) {
      double closest = 0.5;
      for (const float p : probs) closest = std::min(closest, std::abs(static_cast<double>(p) - 0.5));
      return 1.0 - 2.0 * closest;
    }
    double h = 0.0;
    for (const float pf : probs) {
      const double p = std::clamp(static_cast<double>(pf), 0.0, 1.0);
      if (p > 0.0 && p < 1.0) h -= p * std::log2(p) + (1.0 - p) * std::log2(1.0 - p);
    }
    return h / static_cast<double>(probs.size());
  }
  if (measure == Uncertainty::kMargin) {
    double first = 0.0, second = 0.0;
    for (const float pf : probs) {
      const double p = pf;
      if (p > first) {
        second = first;
        first = p;
      } else if (p > second) {
        second = p;
      }
    }
    return 1.0 - (first - second);
  }
  if (probs.size() < 2) return 0.0;
  double h = 0.0;
  for (const float pf : probs)
    if (pf > 0.0f) h -= static_cast<double>(pf) * std::log(static_cast<double>(pf));
  return h / std::log(static_cast<double>(probs.size()));
}

namespace {

std::vector<float> normalised(std::span<const float> v) {
  double n = 0.0;
  for (const float x : v) n += static_cast<double>(x) * x;
  n = std::sqrt(n);
  std::vector<float> out(v.begin(), v.end());
  if (n > 0)
    for (float& x : out) x = static_cast<float>(x / n);
  return out;
}

double feature_distance(const std::vector<float>& a, const std::vector<float>& b) {
  double s = 0.0;
  for (std::size_t i = 0; i < a.size(); ++i) {
    const double d = static_cast<double>(a[i]) - b[i];
    s += d * d;
  }
  return std::sqrt(s);
}

double jaccard(const std::vector<std::int32_t>& a, const std::vector<std::int32_t>& b) {
  // Both sorted and unique.
  std::size_t i = 0, j = 0, common = 0;
  while (i < a.size() && j < b.size()) {
    if (a[i] == b[j]) {
      ++common;
      ++i;
      ++j;
    } else if (a[i] < b[j]) {
      ++i;
    } else {
      ++j;
    }
  }
  const std::size_t uni = a.size() + b.size() - common;
  return uni == 0 ? 1.0 : static_cast<double>(common) / static_cast<double>(uni);
}

// 1. Exact duplicates (same model input: token ids and, for a character encoder, the tokens'
// characters) collapse onto their first occurrence; each kept text gets its uncertainty.
std::vector<Pick> collapse_duplicates(std::span<const data::EncodedExample> pool,
                                      std::span<const ExamplePrediction> predictions, const PickOptions& o) {
  std::map<std::vector<std::int32_t>, std::size_t> first_of;
  std::vector<Pick> unique;
  std::vector<std::int32_t> key;
  for (std::size_t i = 0; i < pool.size(); ++i) {
    key = pool[i].ids;
    if (!pool[i].char_offsets.empty()) {
      key.push_back(-1);  // no token id is negative: the characters start here
      key.insert(key.end(), pool[i].char_offsets.begin(), pool[i].char_offsets.end());
      key.insert(key.end(), pool[i].char_ids.begin(), pool[i].char_ids.end());
    }
    const auto [it, fresh] = first_of.emplace(key, unique.size());
    if (!fresh) {
      unique[it->second].copies.push_back(i);
      continue;
    }
    Pick p;
    p.index = i;
    p.uncertainty = uncertainty(predictions[i].probs, o.multi_label, o.measure);
    unique.push_back(std::move(p));
  }
  return unique;
}

// 3. The first `want` of the ordered texts, with near-exact duplicates (token-set Jaccard) joining
// the earlier kept text.
std::vector<Pick> shortlist_of(std::span<const data::EncodedExample> pool, std::vector<Pick>& ordered,
                               std::size_t want) {
  std::vector<Pick> shortlist;
  std::vector<std::vector<std::int32_t>> sets;
  for (auto& p : ordered) {
    if (shortlist.size() >= want) break;
    std::vector<std::int32_t> set = pool[p.index].ids;
    std::sort(set.begin(), set.end());
    set.erase(std::unique(set.begin(), set.end()), set.end());
    bool merged = false;
    for (std::size_t k = 0; k < shortlist.size() && !merged; ++k)
      if (jaccard(set, sets[k]) >= kDuplicateJaccard) {
        shortlist[k].copies.push_back(p.index);
        shortlist[k].copies.insert(shortlist[k].copies.end(), p.copies.begin(), p.copies.end());
        merged = true;
      }
    if (merged) continue;
    sets.push_back(std::move(set));
    shortlist.push_back(std::move(p));
  }
  return shortlist;
}

// 4. Greedy k-center over the shortlist (Sener & Savarese 2018, Algorithm 1): min_dist[i] is the
// distance of candidate i to the nearest labelled or picked text.
std::vector<Pick> k_center(const std::vector<Pick>& shortlist, std::span<const ExamplePrediction> predictions,
                           std::span<const std::vector<float>> labelled_features, std::size_t count) {
  std::vector<std::vector<float>> f;
  f.reserve(shortlist.size());
  for (const auto& p : shortlist) {
    GYRE_CHECK(!predictions[p.index].features.empty(), "pick_to_label: the diverse rule needs features");
    f.push_back(normalised(predictions[p.index].features));
  }
  std::vector<double> min_dist(shortlist.size(), std::numeric_limits<double>::infinity());
  for (const auto& l : labelled_features) {
    const std::vector<float> ln = normalised(l);
    GYRE_CHECK(ln.size() == (f.empty() ? ln.size() : f[0].size()), "pick_to_label: feature widths differ");
    for (std::size_t i = 0; i < f.size(); ++i)
      min_dist[i] = std::min(min_dist[i], feature_distance(f[i], ln));
  }
  std::vector<Pick> out;
  std::vector<bool> taken(shortlist.size(), false);
  while (out.size() < count && out.size() < shortlist.size()) {
    // Farthest candidate; with nothing labelled yet every distance is infinite and the first
    // (most uncertain) wins the tie.
    std::size_t best = shortlist.size();
    for (std::size_t i = 0; i < shortlist.size(); ++i)
      if (!taken[i] && (best == shortlist.size() || min_dist[i] > min_dist[best])) best = i;
    taken[best] = true;
    Pick p = shortlist[best];
    p.distance = std::isfinite(min_dist[best]) ? min_dist[best] : 0.0;
    out.push_back(std::move(p));
    for (std::size_t i = 0; i < shortlist.size(); ++i)
      if (!taken[i]) min_dist[i] = std::min(min_dist[i], feature_distance(f[i], f[best]));
  }
  return out;
}

}  // namespace

std::vector<Pick> pick_to_label(std::span<const data::EncodedExample> pool,
                                std::span<const ExamplePrediction> predictions,
                                std::span<const std::vector<float>> labelled_features, const PickOptions& o) {
  GYRE_CHECK(pool.size() == predictions.size(), "pick_to_label: one prediction per pool text");
  std::vector<Pick> unique = collapse_duplicates(pool, predictions, o);
  // 2. Order: random permutation, or most uncertain first (ties: pool order).
  if (o.rule == PickRule::kRandom) {
    Rng rng(o.seed);
    rng.shuffle(std::span<Pick>(unique));
  } else {
    std::stable_sort(unique.begin(), unique.end(),
                     [](const Pick& a, const Pick& b) { return a.uncertainty > b.uncertainty; });
  }
  const std::size_t want = o.rule == PickRule::kDiverse ? o.count * kShortlistFactor : o.count;
  std::vector<Pick> shortlist = shortlist_of(pool, unique, want);
  if (o.rule != PickRule::kDiverse) return shortlist;
  return k_center(shortlist, predictions, labelled_features, o.count);
}

}  // namespace gyre::train
