// The runtime alone, in C++17 (gyre::runtime needs nothing newer): load a model, classify a line.
//   runtime-only MODEL TEXT
#include <cstdio>

#include "gyre/runtime/model.hpp"

int main(int argc, char** argv) {
  if (argc != 3) return 2;
  const auto model = gyre::runtime::Model::load(argv[1]);
  gyre::runtime::Context ctx(model);
  const auto& r = ctx.classify(argv[2]);
  std::printf("%s\t%.4f\n", model.labels()[r.best].c_str(), static_cast<double>(r.probabilities[r.best]));
  return 0;
}
