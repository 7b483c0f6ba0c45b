// Runtime vs PyTorch: models written by tools/make_runtime_fixtures.py (its own Python writer of
// the format in docs/model-format.md) with the probabilities python3-torch computed in float64.

#include <catch2/catch.hpp>

#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "gyre/runtime/model.hpp"

using gyre::runtime::Context;
using gyre::runtime::Model;
using gyre::runtime::Task;
using Catch::Matchers::WithinAbs;

TEST_CASE("runtime probabilities equal PyTorch's on the committed fixtures", "[runtime][parity]") {
  const std::string dir = std::string(GYRE_FIXTURES_DIR) + "/runtime/";
  std::ifstream in(dir + "torch_expected.tsv");
  REQUIRE(in.good());
  std::string line;
  int checked = 0;
  while (std::getline(in, line)) {
    if (line.empty() || line[0] == '#') continue;
    const auto t1 = line.find('\t'), t2 = line.find('\t', t1 + 1);
    const std::string name = line.substr(0, t1), text = line.substr(t1 + 1, t2 - t1 - 1);
    std::vector<std::vector<double>> want(1);
    std::istringstream ps(line.substr(t2 + 1));
    std::string tok;
    while (ps >> tok) {
      if (tok.back() == ';') {
        tok.pop_back();
        want.back().push_back(std::stod(tok));
        want.emplace_back();
        continue;
      }
      const auto semi = tok.find(';');
      if (semi != std::string::npos) {
        want.back().push_back(std::stod(tok.substr(0, semi)));
        want.emplace_back();
        want.back().push_back(std::stod(tok.substr(semi + 1)));
      } else {
        want.back().push_back(std::stod(tok));
      }
    }
    const Model model = Model::load(dir + name + ".gyre");
    Context ctx(model);
    INFO(name << ": " << text);
    if (model.architecture().task == Task::kClassify) {
      const auto& r = ctx.classify(text);
      REQUIRE(r.probabilities.size() == want[0].size());
      // ref: python3-torch float64 forward on the same float32 weights; runtime computes in float32.
      for (std::size_t i = 0; i < want[0].size(); ++i) REQUIRE_THAT(r.probabilities[i], WithinAbs(want[0][i], 1e-5));
    } else {
      const auto& r = ctx.tag(text);
      const std::size_t C = model.labels().size();
      REQUIRE(r.tags.size() == want.size());
      for (std::size_t t = 0; t < want.size(); ++t)
        for (std::size_t i = 0; i < C; ++i) REQUIRE_THAT(r.probabilities[t * C + i], WithinAbs(want[t][i], 1e-5));
    }
    ++checked;
  }
  REQUIRE(checked == 20);
}
