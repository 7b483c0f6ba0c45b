// `gyre inspect` on a fixture model and on a corrupted copy. Exists only in builds with the CLI
// (GYRE_BUILD_CLI); ctest runs after the default target, which builds the binary.

#include <catch2/catch.hpp>

#include <sys/wait.h>
#include <cstdio>
#include <fstream>
#include <iterator>
#include <string>
#include <vector>

namespace {

[[maybe_unused]] std::string run(const std::string& cmd, int& status) {
  std::string out;
  FILE* p = popen((cmd + " 2>&1").c_str(), "r");
  REQUIRE(p != nullptr);
  char buf[4096];
  std::size_t n;
  while ((n = fread(buf, 1, sizeof buf, p)) > 0) out.append(buf, n);
  status = WEXITSTATUS(pclose(p));
  return out;
}

}  // namespace

#ifdef GYRE_CLI_PATH
TEST_CASE("gyre inspect shows the header, tensors and checksum status", "[runtime][cli]") {
  INFO("build the default target first: " << GYRE_CLI_PATH);
  REQUIRE(std::ifstream(GYRE_CLI_PATH).good());
  using Catch::Matchers::Contains;
  const std::string model = std::string(GYRE_FIXTURES_DIR) + "/runtime/torch_gru_bi_tag.gyre";
  int status = -1;
  const std::string out = run(std::string(GYRE_CLI_PATH) + " inspect " + model, status);
  REQUIRE(status == 0);
  REQUIRE_THAT(out, Contains("checksum     CRC-32C"));
  REQUIRE_THAT(out, Contains(" ok"));
  REQUIRE_THAT(out, Contains("labels       4: O B-date I-date B-part"));
  REQUIRE_THAT(out, Contains("tokenizer    mode whitespace, nfkc off"));
  REQUIRE_THAT(out, Contains("rnn.l0.bwd.b_hidden  f32   [1 x 15]"));

  // Flip one byte of tensor data: inspect still lists the tensors but reports the mismatch.
  std::ifstream in(model, std::ios::binary);
  std::vector<char> bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  bytes[bytes.size() - 100] = static_cast<char>(bytes[bytes.size() - 100] ^ 1);
  const std::string bad = std::string(GYRE_TEST_TMP_DIR) + "/inspect_corrupt.gyre";
  std::system((std::string("mkdir -p ") + GYRE_TEST_TMP_DIR).c_str());
  std::ofstream(bad, std::ios::binary).write(bytes.data(), static_cast<std::streamsize>(bytes.size()));
  const std::string out2 = run(std::string(GYRE_CLI_PATH) + " inspect " + bad, status);
  REQUIRE(status == 2);
  REQUIRE_THAT(out2, Contains("MISMATCH"));
  REQUIRE_THAT(out2, Contains("readout.w"));
}
#endif  // GYRE_CLI_PATH
