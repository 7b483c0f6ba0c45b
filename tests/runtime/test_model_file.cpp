// Model-file container: checksum, half conversion, strict JSON, writer/reader round trip, and
// refusal of damaged files (truncation at every byte, bit flips, newer version, absurd sizes).

#include <catch2/catch.hpp>

#include <cmath>
#include <cstring>
#include <fstream>
#include <random>
#include <string>
#include <vector>

#include "gyre/runtime/model_file.hpp"
#include "runtime/detail/checksum.hpp"
#include "runtime/detail/half.hpp"
#include "runtime/detail/json.hpp"

using gyre::Span;
using gyre::runtime::DType;
using gyre::runtime::Error;
using gyre::runtime::ModelFile;
using gyre::runtime::ModelFileWriter;
namespace detail = gyre::runtime::detail;
using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;

namespace {

void store_u64(std::vector<unsigned char>& b, std::size_t at, std::uint64_t v) {
  for (int i = 0; i < 8; ++i) b[at + static_cast<std::size_t>(i)] = static_cast<unsigned char>(v >> (8 * i));
}
void store_u32(std::vector<unsigned char>& b, std::size_t at, std::uint32_t v) {
  for (int i = 0; i < 4; ++i) b[at + static_cast<std::size_t>(i)] = static_cast<unsigned char>(v >> (8 * i));
}
// Re-seals a deliberately edited file so that the structural checks (not the CRC) must catch it.
void reseal(std::vector<unsigned char>& b) {
  store_u32(b, b.size() - 8, detail::crc32c(b.data(), b.size() - 8));
}

std::vector<unsigned char> small_file() {
  ModelFileWriter w(R"({"kind":"test","labels":["a","b"]})");
  const std::vector<float> m = {1.0f, -2.0f, 0.5f, 0.25f, 3.0f, -0.125f};
  w.add_tensor("m", 2, 3, m, DType::kF32);
  w.add_tensor("h", 3, 2, m, DType::kF16);
  w.add_tensor("q", 2, 3, m, DType::kI8);
  return w.to_bytes();
}

std::string error_of(const std::vector<unsigned char>& b) {
  try {
    (void)ModelFile::from_buffer(b.data(), b.size(), "f.gyre");
  } catch (const Error& e) {
    return e.what();
  }
  return "";
}

}  // namespace

TEST_CASE("CRC-32C matches the published check values", "[runtime][format]") {
  // ref: RFC 3720 appendix B.4 and the CRC catalogue entry CRC-32/ISCSI: check("123456789") = 0xE3069283.
  const char* digits = "123456789";
  REQUIRE(detail::crc32c(digits, 9) == 0xE3069283U);
  // ref: RFC 3720 B.4: 32 bytes of zeros -> 0x8A9136AA; 32 bytes of 0xFF -> 0x62A8AB43.
  std::vector<unsigned char> zeros(32, 0), ones(32, 0xFF), inc(32);
  REQUIRE(detail::crc32c(zeros.data(), 32) == 0x8A9136AAU);
  REQUIRE(detail::crc32c(ones.data(), 32) == 0x62A8AB43U);
  // ref: RFC 3720 B.4: bytes 00..1F incrementing -> 0x46DD794E.
  for (std::size_t i = 0; i < 32; ++i) inc[i] = static_cast<unsigned char>(i);
  REQUIRE(detail::crc32c(inc.data(), 32) == 0x46DD794EU);
  // Incremental use equals one pass.
  REQUIRE(detail::crc32c(inc.data() + 13, 19, detail::crc32c(inc.data(), 13)) == 0x46DD794EU);
}

TEST_CASE("binary16 conversion follows IEEE 754", "[runtime][format]") {
  // ref: IEEE 754-2008 binary16 encodings (worked by hand from the definition: 1 sign, 5 exponent
  // bits with bias 15, 10 fraction bits).
  REQUIRE(detail::float_to_half(1.0f) == 0x3C00);
  REQUIRE(detail::float_to_half(-2.0f) == 0xC000);
  REQUIRE(detail::float_to_half(65504.0f) == 0x7BFF);               // largest finite half
  REQUIRE(detail::float_to_half(65520.0f) == 0x7C00);               // halfway to 2^16 ties to even -> inf
  REQUIRE(detail::float_to_half(std::ldexp(1.0f, -24)) == 0x0001);  // smallest subnormal
  REQUIRE(detail::float_to_half(std::ldexp(1.0f, -25)) == 0x0000);  // tie -> even (zero)
  REQUIRE(detail::float_to_half(std::ldexp(1.0f, -14)) == 0x0400);  // smallest normal
  REQUIRE(detail::float_to_half(0.1f) == 0x2E66);                   // 0.0999755859375
  REQUIRE(detail::float_to_half(1.0f + std::ldexp(1.0f, -11)) == 0x3C00);      // tie, even mantissa stays
  REQUIRE(detail::float_to_half(1.0f + 3 * std::ldexp(1.0f, -11)) == 0x3C02);  // tie, odd rounds up
  REQUIRE(std::isnan(detail::half_to_float(detail::float_to_half(std::nanf("")))));
  REQUIRE(detail::half_to_float(0x7BFF) == 65504.0f);
  REQUIRE(detail::half_to_float(0x0001) == std::ldexp(1.0f, -24));
  REQUIRE(detail::half_to_float(0x2E66) == 0.0999755859375f);
  // Every finite half round-trips exactly through float.
  for (std::uint32_t h = 0; h < 0x10000; ++h) {
    if ((h & 0x7C00U) == 0x7C00U) continue;
    const auto hh = static_cast<std::uint16_t>(h);
    REQUIRE(detail::float_to_half(detail::half_to_float(hh)) == hh);
  }
}

TEST_CASE("strict JSON reader", "[runtime][format]") {
  const auto j = detail::Json::parse(R"( {"a": [1, -2.5e3, true, null, "x\u00e9\ud83d\ude00"], "b": {}} )");
  REQUIRE(j.is_object());
  REQUIRE(j.find("a")->items().size() == 5);
  REQUIRE_THAT(j.find("a")->items()[1].as_number(), WithinAbs(-2500.0, 0.0));
  REQUIRE(j.find("a")->items()[4].as_string() == "x\xC3\xA9\xF0\x9F\x98\x80");
  REQUIRE(detail::Json::parse(j.dump()).dump() == j.dump());
  auto fails = [](const char* text, const char* what) {
    REQUIRE_THROWS_WITH(detail::Json::parse(text), Contains(what));
  };
  fails("{\"a\":1,}", "line 1, column 8");
  fails("{\"a\":1,\"a\":2}", "duplicate key");
  fails("[1,\n 02]", "line 2, column 3: leading zeros");
  fails("[NaN]", "expected a value");
  fails("\"\xC0\xAF\"", "invalid UTF-8");
  fails("\"\\ud800\"", "surrogate");
  fails("[1] 2", "after the JSON value");
  fails("[1e999]", "out of range");
  REQUIRE_THROWS_WITH(detail::Json::parse(std::string(100, '[') + std::string(100, ']')),
                      Contains("nesting deeper"));
}

TEST_CASE("writer and reader round-trip f32, f16 and i8 tensors", "[runtime][format]") {
  const std::vector<unsigned char> bytes = small_file();
  const ModelFile f = ModelFile::from_buffer(bytes.data(), bytes.size());
  REQUIRE(f.format_version() == 2);
  REQUIRE(f.header_json() == R"({"kind":"test","labels":["a","b"]})");
  REQUIRE(f.tensors().size() == 3);
  const auto& m = f.tensor("m");
  REQUIRE(m.dtype == DType::kF32);
  REQUIRE(m.rows == 2);
  REQUIRE(m.cols == 3);
  REQUIRE(m.offset % 64 == 0);
  REQUIRE(f.read_f32(m) == std::vector<float>{1.0f, -2.0f, 0.5f, 0.25f, 3.0f, -0.125f});
  // These values are exact in binary16.
  REQUIRE(f.read_f32(f.tensor("h")) == std::vector<float>{1.0f, -2.0f, 0.5f, 0.25f, 3.0f, -0.125f});
  const auto& q = f.tensor("q");
  REQUIRE(q.dtype == DType::kI8);
  // Symmetric per-row scale = max|row| / 127 (Jacob et al. 2018 with zero point 0).
  REQUIRE_THAT(q.scales[0], WithinAbs(2.0 / 127.0, 1e-9));
  REQUIRE_THAT(q.scales[1], WithinAbs(3.0 / 127.0, 1e-9));
  const auto deq = f.read_f32(q);
  const std::vector<float> orig = {1.0f, -2.0f, 0.5f, 0.25f, 3.0f, -0.125f};
  for (std::size_t i = 0; i < orig.size(); ++i)  // error <= scale / 2
    REQUIRE_THAT(deq[i], WithinAbs(orig[i], (i < 3 ? 2.0 : 3.0) / 127.0 / 2.0 + 1e-7));
  REQUIRE_THROWS_WITH(f.tensor("nope"), Contains("missing tensor \"nope\""));
}

TEST_CASE("writer rejects bad input", "[runtime][format]") {
  ModelFileWriter w;
  const std::vector<float> v = {1.0f, 2.0f};
  REQUIRE_THROWS_WITH(w.set_header_json("[1]"), Contains("must be an object"));
  REQUIRE_THROWS_WITH(w.add_tensor("a", 3, 1, v), Contains("2 values for 3 elements"));
  w.add_tensor("a", 1, 2, v);
  REQUIRE_THROWS_WITH(w.add_tensor("a", 1, 2, v), Contains("duplicate tensor name"));
  const std::vector<float> bad = {1.0f, std::nanf("")};
  REQUIRE_THROWS_WITH(w.add_tensor("b", 1, 2, bad), Contains("not finite"));
}

TEST_CASE("file written to disk is memory-mapped and read back", "[runtime][format]") {
  const std::string path = std::string(GYRE_TEST_TMP_DIR) + "/rt_small.gyre";
  std::system((std::string("mkdir -p ") + GYRE_TEST_TMP_DIR).c_str());
  ModelFileWriter w(R"({"x":1})");
  const std::vector<float> v = {1.5f, 2.5f, 3.5f};
  w.add_tensor("v", std::vector<std::uint64_t>{3}, v);
  w.write(path);
  const ModelFile f = ModelFile::open(path);
  REQUIRE(f.read_f32(f.tensor("v")) == v);
  REQUIRE_THROWS_WITH(ModelFile::open(path + ".missing"), Contains("cannot open"));
}

TEST_CASE("damaged files are refused with a clear error", "[runtime][format][robustness]") {
  const std::vector<unsigned char> good = small_file();
  REQUIRE(error_of(good).empty());

  SECTION("truncated at every byte boundary") {
    for (std::size_t n = 0; n < good.size(); ++n) {
      std::vector<unsigned char> cut(good.begin(), good.begin() + static_cast<std::ptrdiff_t>(n));
      const std::string e = error_of(cut);
      INFO("length " << n);
      REQUIRE_FALSE(e.empty());
      REQUIRE_THAT(e, Contains("f.gyre: "));
    }
  }
  SECTION("every single bit flip is detected") {
    for (std::size_t i = 0; i < good.size(); ++i) {
      for (int bit = 0; bit < 8; ++bit) {
        std::vector<unsigned char> b = good;
        b[i] = static_cast<unsigned char>(b[i] ^ (1U << bit));
        INFO("byte " << i << " bit " << bit);
        REQUIRE_FALSE(error_of(b).empty());
      }
    }
  }
  SECTION("newer format version") {
    std::vector<unsigned char> b = good;
    store_u32(b, 8, 3);
    reseal(b);
    REQUIRE(error_of(b) == "f.gyre: file format version 3 is newer than this runtime (2); upgrade gyre");
  }
  SECTION("format version 1 (tensor names before the rename) is refused, naming the file") {
    std::vector<unsigned char> b = good;
    store_u32(b, 8, 1);
    reseal(b);
    REQUIRE(error_of(b) ==
            "f.gyre: file format version 1 was written by an older gyre; this one reads version 2, whose "
            "tensor names differ: retrain with this gyre, then export again");
  }
  SECTION("big-endian byte-order mark") {
    std::vector<unsigned char> b = good;
    store_u32(b, 12, 0x0D0C0B0AU);
    REQUIRE_THAT(error_of(b), Contains("big-endian"));
  }
  SECTION("bad magic") {
    std::vector<unsigned char> b = good;
    b[0] = 'G';
    REQUIRE_THAT(error_of(b), Contains("not a gyre model file"));
  }
  SECTION("trailing bytes") {
    std::vector<unsigned char> b = good;
    b.push_back(0);
    REQUIRE_THAT(error_of(b), Contains("unexpected bytes after its end"));
  }
  SECTION("checksum") {
    std::vector<unsigned char> b = good;
    b[70] ^= 0x20;
    REQUIRE_THAT(error_of(b), Contains("checksum mismatch"));
  }
  // The entry of the first tensor starts right after the header, 8-aligned.
  const ModelFile f = ModelFile::from_buffer(good.data(), good.size());
  const std::size_t entry = (64 + f.header_json().size() + 7) / 8 * 8;
  SECTION("absurd header size") {
    std::vector<unsigned char> b = good;
    store_u64(b, 32, 1ULL << 62);
    reseal(b);
    REQUIRE_THAT(error_of(b), Contains("header size"));
  }
  SECTION("absurd tensor count") {
    std::vector<unsigned char> b = good;
    store_u64(b, 48, 1ULL << 40);
    reseal(b);
    REQUIRE_THAT(error_of(b), Contains("absurd tensor count"));
    store_u64(b, 48, 1000);
    reseal(b);
    REQUIRE_THAT(error_of(b), Contains("does not fit"));
  }
  SECTION("absurd dimension") {
    std::vector<unsigned char> b = good;
    store_u64(b, entry + 8, 1ULL << 60);
    reseal(b);
    REQUIRE_THAT(error_of(b), Contains("absurd shape"));
    store_u64(b, entry + 8, 1ULL << 30);  // plausible alone, but does not match the data size
    reseal(b);
    REQUIRE_THAT(error_of(b), Contains("does not match its shape"));
  }
  SECTION("offset outside the file") {
    std::vector<unsigned char> b = good;
    store_u64(b, entry + 8 + 16, 1ULL << 40);  // data offset of tensor "m" (rank 2)
    reseal(b);
    REQUIRE_THAT(error_of(b), Contains("outside the data section"));
    store_u64(b, entry + 8 + 16, ~0ULL - 63);  // overflow bait
    reseal(b);
    REQUIRE_THAT(error_of(b), Contains("outside the data section"));
  }
  SECTION("overlapping tensors") {
    std::vector<unsigned char> b = good;
    const std::uint64_t m_off = f.tensor("m").offset;
    const std::size_t entry2 = entry + 8 + 16 + 24 + 8;  // "m": rank 2, name padded to 8
    store_u64(b, entry2 + 8 + 16, m_off);
    reseal(b);
    REQUIRE_THAT(error_of(b), Contains("overlap"));
  }
}
