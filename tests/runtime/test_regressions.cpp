// Inputs that once broke the loader (found by tests/fuzz/run_fuzz.sh) must now load cleanly or
// be refused with gyre::runtime::Error. Files live in tests/fixtures/runtime/regress/.

#include <catch2/catch.hpp>

#include <filesystem>
#include <fstream>
#include <iterator>
#include <vector>

#include "gyre/runtime/model.hpp"

TEST_CASE("fuzzer regressions are refused cleanly", "[runtime][robustness]") {
  namespace fs = std::filesystem;
  const fs::path dir = fs::path(GYRE_FIXTURES_DIR) / "runtime" / "regress";
  std::vector<fs::path> files;
  for (const auto& entry : fs::directory_iterator(dir))
    if (entry.is_regular_file() && entry.path().filename() != "README.md") files.push_back(entry.path());
  // The committed seeds must load: they are the fuzzer's starting corpus.
  for (const auto& entry : fs::directory_iterator(dir.parent_path()))
    if (entry.path().extension() == ".gyre") REQUIRE_NOTHROW(gyre::runtime::Model::load(entry.path().string()));
  for (const auto& path : files) {
    std::ifstream in(path, std::ios::binary);
    std::vector<unsigned char> bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
    INFO(path.string());
    try {
      const auto model = gyre::runtime::Model::from_buffer(bytes.data(), bytes.size());
      gyre::runtime::Context ctx(model);
      const std::uint32_t ids[2] = {1, 0};
      if (model.architecture().task == gyre::runtime::Task::kClassify) {
        ctx.classify_ids(gyre::Span<const std::uint32_t>(ids, 2));
      } else {
        ctx.tag_ids(gyre::Span<const std::uint32_t>(ids, 2));
      }
    } catch (const gyre::runtime::Error& e) {
      REQUIRE(std::string(e.what()).size() > 0);
    }
  }
}
