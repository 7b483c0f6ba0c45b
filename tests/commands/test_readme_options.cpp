// The README's option table is the binary's own: `gyre options` (made from the commands' option
// definitions) must equal the table between the README markers, so documented names, defaults
// and meanings cannot drift. After changing an option, run tools/update_readme_options.sh.

#include <catch2/catch.hpp>

#ifdef GYRE_CLI_PATH

#include <filesystem>
#include <string>

#include "support/run_cli.hpp"

namespace {

std::string readme_table() {
  const std::string text = gyre::read_file(std::string(GYRE_SOURCE_DIR) + "/README.md");
  const std::string begin = "<!-- gyre options: begin -->\n", end = "<!-- gyre options: end -->";
  const auto b = text.find(begin);
  const auto e = text.find(end);
  REQUIRE(b != std::string::npos);
  REQUIRE(e != std::string::npos);
  REQUIRE(e > b);
  return text.substr(b + begin.size(), e - b - begin.size());
}

}  // namespace

TEST_CASE("README option table is gyre options", "[cli]") {
  const auto r =
      gyre::test::run_cli(std::filesystem::path(GYRE_TEST_TMP_DIR) / "readme_options", {"options"});
  REQUIRE(r.exit_code == 0);
  REQUIRE(r.out.rfind("| option | commands | value | default | meaning |\n", 0) == 0);
  const std::string readme = readme_table();
  if (readme != r.out) {
    // Name the first line that differs, so the fix (tools/update_readme_options.sh) is obvious.
    std::size_t at = 0, line = 1;
    while (at < readme.size() && at < r.out.size() && readme[at] == r.out[at]) line += readme[at++] == '\n';
    const auto line_of = [&](const std::string& s) {
      const auto start = s.rfind('\n', at == 0 ? 0 : at - 1);
      const auto from = start == std::string::npos || at == 0 ? 0 : start + 1;
      return s.substr(from, s.find('\n', from) - from);
    };
    FAIL("README.md option table differs from `gyre options` at table line "
         << line << "\n  README:       " << line_of(readme) << "\n  gyre options: " << line_of(r.out)
         << "\nrun tools/update_readme_options.sh build/bin/gyre");
  }
  // Each option is listed once per meaning: the names the issue found split are one now.
  CHECK(r.out.find("| `--batch` |") == std::string::npos);
  CHECK(r.out.find("| `--max-size` |") == std::string::npos);
  CHECK(r.out.find("| `--drop-punctuation` |") == std::string::npos);
}

#endif
