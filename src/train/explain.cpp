#include "gyre/train/explain.hpp"

#include <algorithm>
#include <cmath>
#include <cstdio>
#include <numeric>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/runtime/model.hpp"

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
  nlohmann::json list = nlohmann::json::array();
  for (std::size_t t = 0; t < tokens.size(); ++t)
    list.push_back({{"token", tokens[t]}, {"score", scores[t]}});
  out["tokens"] = std::move(list);
  return out;
}

std::string explain_summary(const nlohmann::json& why, std::size_t count) {
  const auto& toks = why.at("tokens");
  std::vector<std::size_t> order(toks.size());
  std::iota(order.begin(), order.end(), std::size_t{0});
  std::stable_sort(order.begin(), order.end(), [&](std::size_t a, std::size_t b) {
    return std::abs(toks[a].at("score").get<double>()) > std::abs(toks[b].at("score").get<double>());
  });
  if (order.size() > count) order.resize(count);
  std::string out;
  for (const auto i : order) {
    char buf[32];
    std::snprintf(buf, sizeof buf, "(%+.3f)", toks[i].at("score").get<double>());
    out += (out.empty() ? "" : " ") + toks[i].at("token").get<std::string>() + buf;
  }
  return out;
}

}  // namespace gyre::train
