// Optimizer trajectories against torch.optim (SGD, Adam, AdamW) over 6 steps with a changing
// learning rate. ref: tests/optim/torch_optim_steps.txt, made by tools/make_optim_fixtures.py
// (torch 1.13, float32). torch's update rules are the ones documented in our headers: SGD's
// velocity accumulates gradients and Nesterov uses g + mu v; Adam folds weight decay into the
// gradient; AdamW multiplies w by (1 - lr * weight_decay) before the Adam step.

#include <catch2/catch.hpp>

#include <fstream>
#include <sstream>
#include <string>
#include <vector>

#include "gyre/nn/parameter.hpp"
#include "gyre/optim/optimizer.hpp"

using Catch::Matchers::WithinAbs;

namespace {

struct Step {
  float lr = 0.0F;
  std::vector<float> grad, expect;
};

struct Case {
  std::string name, optimizer;
  gyre::optim::OptimizerConfig config;
  int rows = 0, cols = 0;
  std::vector<float> init;
  std::vector<Step> steps;
};

std::vector<float> read_floats(std::istringstream& in, int n) {
  std::vector<float> v(static_cast<std::size_t>(n));
  for (float& x : v) in >> x;
  return v;
}

std::vector<Case> load_cases(const std::string& path) {
  std::ifstream file(path);
  REQUIRE(file.good());
  std::vector<Case> cases;
  std::string line;
  std::size_t line_no = 0;
  while (std::getline(file, line)) {
    ++line_no;
    if (line.empty() || line[0] == '#') continue;
    std::istringstream in(line);
    std::string kind;
    in >> kind;
    if (kind == "case") {
      Case c;
      int nesterov = 0, steps = 0;
      in >> c.name >> c.optimizer >> c.config.momentum >> nesterov >> c.config.weight_decay >> steps >>
          c.rows >> c.cols;
      c.config.nesterov = nesterov != 0;
      cases.push_back(c);
    } else if (kind == "init") {
      REQUIRE(!cases.empty());
      cases.back().init = read_floats(in, cases.back().rows * cases.back().cols);
    } else if (kind == "step") {
      REQUIRE(!cases.empty());
      const int n = cases.back().rows * cases.back().cols;
      Step s;
      std::string word;
      in >> s.lr >> word;
      REQUIRE(word == "grad");
      s.grad = read_floats(in, n);
      in >> word;
      REQUIRE(word == "expect");
      s.expect = read_floats(in, n);
      cases.back().steps.push_back(s);
    }
    INFO(path << ":" << line_no);
    REQUIRE_FALSE(in.fail());
  }
  return cases;
}

}  // namespace

TEST_CASE("optimizer steps match torch.optim", "[optim][torch]") {
  const auto cases = load_cases(std::string(GYRE_SOURCE_DIR) + "/tests/optim/torch_optim_steps.txt");
  REQUIRE(cases.size() == 6);
  for (const Case& c : cases) {
    INFO("case " << c.name);
    gyre::nn::ParameterStore store;
    gyre::nn::Parameter& p = store.add("w", c.rows, c.cols);
    std::copy(c.init.begin(), c.init.end(), p.value.data());
    auto opt = gyre::optim::make_optimizer(c.optimizer, c.config);
    REQUIRE(c.steps.size() == 6);
    for (std::size_t s = 0; s < c.steps.size(); ++s) {
      INFO("step " << s + 1);
      std::copy(c.steps[s].grad.begin(), c.steps[s].grad.end(), p.grad.data());
      opt->step(store, c.steps[s].lr);
      // float32 on both sides with differently ordered operations: 2e-6 absolute on values of
      // order 1 (a few ulp after 6 steps).
      for (std::size_t i = 0; i < c.steps[s].expect.size(); ++i)
        REQUIRE_THAT(p.value.data()[i], WithinAbs(c.steps[s].expect[i], 2e-6));
    }
  }
}
