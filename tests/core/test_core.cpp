#include <catch2/catch.hpp>

#include <sys/wait.h>
#include <unistd.h>

#include <filesystem>
#include <fstream>
#include <set>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"

using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;

TEST_CASE("Rng: same seed gives the same stream, different seeds differ", "[core]") {
  gyre::Rng a(42), b(42), c(43);
  for (int i = 0; i < 100; ++i) {
    REQUIRE(a.next_u64() == b.next_u64());
  }
  REQUIRE(gyre::Rng(42).next_u64() != c.next_u64());
}

TEST_CASE("Rng: uniform, below and normal have the right ranges and moments", "[core]") {
  gyre::Rng r(7);
  double sum = 0, sum_sq = 0;
  const int n = 200000;
  for (int i = 0; i < n; ++i) {
    const float u = r.uniform();
    REQUIRE(u >= 0.0f);
    REQUIRE(u < 1.0f);
    const double z = r.normal();
    sum += z;
    sum_sq += z * z;
  }
  // Sample mean of n standard normals has sd 1/sqrt(n) ~ 0.0022; 5 sd tolerance.
  REQUIRE_THAT(sum / n, WithinAbs(0.0, 0.012));
  REQUIRE_THAT(sum_sq / n, WithinAbs(1.0, 0.02));
  std::set<std::uint64_t> seen;
  for (int i = 0; i < 1000; ++i) {
    const auto k = r.below(5);
    REQUIRE(k < 5);
    seen.insert(k);
  }
  REQUIRE(seen.size() == 5);
}

TEST_CASE("Rng: state round-trips for checkpoints", "[core]") {
  gyre::Rng r(9);
  r.normal();
  const auto st = r.state();
  const float a = r.normal();
  const auto b = r.next_u64();
  gyre::Rng s(1);
  s.set_state(st);
  REQUIRE(s.normal() == a);
  REQUIRE(s.next_u64() == b);
}

TEST_CASE("stable_hash is FNV-1a 64", "[core]") {
  // ref: FNV-1a 64-bit test vectors, IETF draft-eastlake-fnv (offset basis for the empty
  // string, and "a" -> 0xaf63dc4c8601ec8c).
  REQUIRE(gyre::stable_hash("", 0) == 0xcbf29ce484222325ULL);
  REQUIRE(gyre::stable_hash("a", 1) == 0xaf63dc4c8601ec8cULL);
}

TEST_CASE("AtomicFile: commit replaces, abandon keeps the old file", "[core]") {
  namespace fs = std::filesystem;
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "core_atomic";
  fs::create_directories(dir);
  const fs::path target = dir / "file.txt";
  gyre::write_file_atomic(target, "old");
  {
    gyre::AtomicFile f(target);
    f.write("new content that is never committed");
  }
  REQUIRE(gyre::read_file(target) == "old");
  {
    gyre::AtomicFile f(target);
    f.write(std::string(100000, 'x'));
    f.write("tail");
    f.commit();
  }
  const auto text = gyre::read_file(target);
  REQUIRE(text.size() == 100004);
  REQUIRE(text.substr(100000) == "tail");
  for (const auto& entry : fs::directory_iterator(dir)) REQUIRE(entry.path().filename() == "file.txt");
  REQUIRE_THROWS_AS(gyre::read_file(dir / "missing"), gyre::IoError);
}

TEST_CASE("ParseError names file and line", "[core]") {
  const gyre::ParseError e("data/train.tsv", 17, "expected TAB after label");
  REQUIRE(std::string(e.what()) == "data/train.tsv:17: expected TAB after label");
  REQUIRE(e.line() == 17);
  const auto check_fails = [] { GYRE_CHECK(1 + 1 == 3, "arithmetic is broken"); };
  REQUIRE_THROWS_WITH(check_fails(), Contains("arithmetic is broken"));
}

TEST_CASE("FormatError names the path once", "[core]") {
  // Issue 10 item 10: messages read 'm/x.gyre: m/x.gyre: ...'.
  REQUIRE(std::string(gyre::FormatError("m/x.gyre", "file is truncated").what()) ==
          "m/x.gyre: file is truncated");
  // A message passed on from a reader that already named the file keeps one copy of the path.
  REQUIRE(std::string(gyre::FormatError("m/x.gyre", "m/x.gyre: file is truncated").what()) ==
          "m/x.gyre: file is truncated");
  // Only an exact "path: " prefix counts: another file named in the message stays.
  REQUIRE(std::string(gyre::FormatError("m/x.gyre", "m/x.gyre.bak: other").what()) ==
          "m/x.gyre: m/x.gyre.bak: other");
}

TEST_CASE("stale temporaries of a process that no longer runs are removed, others kept", "[core]") {
  namespace fs = std::filesystem;
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "core_stale";
  fs::remove_all(dir);
  fs::create_directories(dir);
  const pid_t child = ::fork();  // a pid that is certainly gone once reaped
  if (child == 0) ::_exit(0);
  int status = 0;
  REQUIRE(::waitpid(child, &status, 0) == child);
  const std::string dead = std::to_string(child);
  const auto make = [&](const std::string& name) {
    std::ofstream(dir / name) << "partial";
    return dir / name;
  };
  const fs::path stale_a = make("checkpoint-last.bin.tmp." + dead);
  const fs::path stale_b = make("log.jsonl.tmp." + dead);
  const fs::path running = make("config.json.tmp.1");  // pid 1 always runs
  const fs::path ours = make("vocab.json.tmp." + std::to_string(::getpid()));
  const fs::path not_temp = make("notes.tmp.12ab");
  const fs::path plain = make("data.tsv");

  // Only the target's own temporaries...
  auto removed = gyre::remove_stale_temp_files_of(dir / "checkpoint-last.bin");
  REQUIRE(removed == std::vector<fs::path>{stale_a});
  REQUIRE(fs::exists(stale_b));
  // ... and, writing a file, its own stale temporaries go first.
  gyre::write_file_atomic(dir / "log.jsonl", "ok\n");
  REQUIRE_FALSE(fs::exists(stale_b));
  make("metrics.json.tmp." + dead);
  removed = gyre::remove_stale_temp_files(dir);
  REQUIRE(removed == std::vector<fs::path>{dir / ("metrics.json.tmp." + dead)});
  for (const fs::path& kept : {running, ours, not_temp, plain}) {
    INFO(kept.string());
    REQUIRE(fs::exists(kept));
  }
}
