#pragma once
// The `gyre hone` command line shared by the hone CLI tests and the MPI tests (which check that a
// job of two ranks reaches what one process does with the same arguments).

#include <filesystem>
#include <string>
#include <vector>

namespace gyre::test {

/// Small and quick, on the demo corpus `corpus` (corpora/demo/<corpus>.{train,dev}.tsv): tiny
/// model, 5 settings, epoch cap 9 (trial 1, the defaults, to 9 epochs; then bracket s = 2 cut to
/// the 4 trials left: 4 at 1 epoch, 1 at 3, 1 at 9), seed 3, one thread, output in `out`. The
/// seed's value is `args[args.size() - 5]`.
inline std::vector<std::string> hone_args(const std::filesystem::path& out,
                                          const std::string& corpus = "sentiment") {
  const std::string demo = std::string(GYRE_SOURCE_DIR) + "/corpora/demo/";
  return {"hone",
          "--train",
          demo + corpus + ".train.tsv",
          "--dev",
          demo + corpus + ".dev.tsv",
          "--hidden-size",
          "8",
          "--embedding-size",
          "8",
          "--trials",
          "5",
          "--epoch-cap",
          "9",
          "--seed",
          "3",
          "--threads",
          "1",
          "--out",
          out.string()};
}

}  // namespace gyre::test
