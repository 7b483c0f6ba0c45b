// embed-demo: classify lines of stdin with a gyre model file, using only the embedded runtime.
// Prints "label<TAB>probability" per input line (the arg-max label; for a multi-label model the
// labels at or above the threshold, comma-separated, with the highest probability).

#include <cstdio>
#include <iostream>
#include <string>

#include <gyre/runtime/model.hpp>

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: %s MODEL.gyre < lines.txt\n", argv[0]);
    return 2;
  }
  try {
    const gyre::runtime::Model model = gyre::runtime::Model::load(argv[1]);
    if (model.architecture().task != gyre::runtime::Task::kClassify) {
      std::fprintf(stderr, "embed-demo: %s is a tagger; this demo needs a classifier\n", argv[1]);
      return 2;
    }
    gyre::runtime::Context context(model);  // reused for every line: no allocation per line
    std::string line;
    while (std::getline(std::cin, line)) {
      if (!line.empty() && line.back() == '\r') line.pop_back();
      const auto& result = context.classify(line);
      std::string names;
      for (std::uint32_t label : result.chosen) {
        if (!names.empty()) names += ',';
        names += model.labels()[label];
      }
      if (names.empty()) names = "-";  // multi-label: nothing reached the threshold
      std::printf("%s\t%.4f\n", names.c_str(), static_cast<double>(result.probabilities[result.best]));
    }
  } catch (const gyre::runtime::Error& e) {
    std::fprintf(stderr, "embed-demo: %s\n", e.what());
    return 1;
  }
  return 0;
}
