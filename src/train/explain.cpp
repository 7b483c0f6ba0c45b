#include "gyre/train/explain.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <numeric>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/runtime/ngram_part.hpp"

namespace gyre::train {

nlohmann::json explain(const io::TrainedModel& trained, const data::EncodedExample& example,
                       std::span<const std::string> tokens, int target, int steps) {
  const std::vector<std::int32_t>& ids = example.ids;
  GYRE_CHECK(trained.spec.task == data::Task::kClassify, "attributions are for classifiers only");
  GYRE_CHECK(ids.size() == tokens.size(), "attributions: one token per id");
  GYRE_CHECK(target >= 0 && target < trained.spec.num_labels(), "attributions: label out of range");
  nlohmann::json out;
  out["label"] = trained.spec.labels[static_cast<std::size_t>(target)];
  std::vector<float> scores;
  if (trained.runtime) {
    runtime::Context ctx(*trained.runtime);
    std::vector<std::uint32_t> u(ids.begin(), ids.end());
    // A model with an n-gram part reads the words too (the tokens given here).
    const auto s = trained.runtime->architecture().has_ngram_part()
                       ? ctx.occlusion_ids(u, example.char_ids, example.char_offsets,
                                           Span<const std::string>(tokens.data(), tokens.size()),
                                           static_cast<std::uint32_t>(target))
                   : example.char_offsets.empty()
                       ? ctx.occlusion_ids(u, static_cast<std::uint32_t>(target))
                       : ctx.occlusion_ids(u, example.char_ids, example.char_offsets,
                                           static_cast<std::uint32_t>(target));
    scores.assign(s.begin(), s.end());
    out["method"] = "occlusion";
  } else {
    const model::TokenAttribution a = trained.model->integrated_gradients(example, target, steps);
    scores = a.scores;
    out["method"] = "integrated_gradients";
    out["completeness"] = {{"output", a.output},
                           {"baseline", a.baseline_output},
                           {"sum", a.sum},
                           {"gap", a.completeness_gap()},
                           {"steps", a.steps}};
  }
  // The n-gram part's share, beside the network's: the part is linear, so each token's share of the
  // label's logit is exact (runtime::NgramPart::token_shares has the rule).
  const runtime::NgramPart& part = trained.ngram_part;
  std::vector<float> part_scores;
  float part_bias = 0.0F;
  if (!part.empty()) {
    runtime::NgramScratch scratch;
    part_scores.resize(tokens.size());
    part_bias = part.token_shares(tokens.data(), tokens.size(), target, part_scores.data(), scratch);
  }
  nlohmann::json list = nlohmann::json::array();
  double part_sum = 0.0;
  for (std::size_t t = 0; t < tokens.size(); ++t) {
    nlohmann::json entry{{"token", tokens[t]}, {"score", scores[t]}};
    if (!part.empty()) {
      entry["ngram_part"] = part_scores[t];
      part_sum += part_scores[t];
    }
    list.push_back(std::move(entry));
  }
  out["tokens"] = std::move(list);
  if (!part.empty())
    out["ngram_part"] = {{"unit", "logit"},
                         {"mix", part.mix()},
                         {"bias", part_bias},
                         {"sum", part_sum},
                         {"logit", part_bias + part_sum}};
  return out;
}

std::string explain_summary(const nlohmann::json& why, std::size_t count, const std::string& field) {
  const auto& toks = why.at("tokens");
  std::vector<std::size_t> order(toks.size());
  std::iota(order.begin(), order.end(), std::size_t{0});
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    return std::abs(toks[a].at(field).get<double>()) > std::abs(toks[b].at(field).get<double>());
  });
  if (order.size() > count) order.resize(count);
  std::string out;
  for (const auto i : order) {
    char buf[32];
    std::snprintf(buf, sizeof buf, "(%+.3f)", toks[i].at(field).get<double>());
    out += (out.empty() ? "" : " ") + toks[i].at("token").get<std::string>() + buf;
  }
  return out;
}

}  // namespace gyre::train
