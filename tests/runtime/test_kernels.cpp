// Dispatched kernels (x86-64: AVX2/FMA/F16C, AVX-512, AVX-512 VNNI; AArch64: NEON, NEON + SDOT,
// run under qemu by tests/cross) against the portable loops,
// and the no-allocation-after-warm-up guarantee of Context, checked with a counting operator new.

#include <catch2/catch.hpp>

#include <algorithm>
#include <atomic>
#include <cmath>
#include <cstdlib>
#include <new>
#include <random>
#include <string>
#include <vector>

#include "gyre/runtime/model.hpp"
#include "model_builder.hpp"
#include "runtime/detail/half.hpp"
#include "runtime/detail/kernels.hpp"

#if defined(__GNUC__) && !defined(__clang__)
// GCC 12 pairs the inlined std::allocator calls with free() and warns although operator new
// itself is replaced by malloc below (false positive of -Wmismatched-new-delete).
#pragma GCC diagnostic ignored "-Wmismatched-new-delete"
#endif

namespace {
std::atomic<long> g_allocations{0};
}  // namespace

#if defined(__SANITIZE_ADDRESS__)
#define GYRE_COUNTING_NEW 0  // AddressSanitizer owns operator new; the counting test is skipped there
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define GYRE_COUNTING_NEW 0
#endif
#endif
#ifndef GYRE_COUNTING_NEW
#define GYRE_COUNTING_NEW 1
#endif

#if GYRE_COUNTING_NEW
// Counting replacements of the global allocation functions (whole test binary; counting only).
void* operator new(std::size_t n) {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  if (void* p = std::malloc(n ? n : 1)) return p;
  throw std::bad_alloc();
}
void* operator new[](std::size_t n) {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  if (void* p = std::malloc(n ? n : 1)) return p;
  throw std::bad_alloc();
}
void operator delete(void* p) noexcept {
  std::free(p);
}
void operator delete[](void* p) noexcept {
  std::free(p);
}
void operator delete(void* p, std::size_t) noexcept {
  std::free(p);
}
void operator delete[](void* p, std::size_t) noexcept {
  std::free(p);
}

void* operator new(std::size_t n, const std::nothrow_t&) noexcept {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  return std::malloc(n ? n : 1);
}
void* operator new[](std::size_t n, const std::nothrow_t&) noexcept {
  g_allocations.fetch_add(1, std::memory_order_relaxed);
  return std::malloc(n ? n : 1);
}
void operator delete(void* p, const std::nothrow_t&) noexcept {
  std::free(p);
}
void operator delete[](void* p, const std::nothrow_t&) noexcept {
  std::free(p);
}
#endif

namespace rd = gyre::runtime::detail;
using Catch::Matchers::WithinAbs;

TEST_CASE("dispatched kernels equal the portable ones", "[runtime][kernels]") {
  std::mt19937 rng(31337);
  std::uniform_real_distribution<float> u(-1.0f, 1.0f);
  const rd::Kernels& ref = rd::kernels_for(rd::Isa::kPortable);
  int checked_sets = 0;
  for (rd::Isa isa :
       {rd::Isa::kAvx2, rd::Isa::kAvx512, rd::Isa::kAvx512Vnni, rd::Isa::kNeon, rd::Isa::kNeonSdot}) {
    if (!rd::isa_supported(isa)) {
      WARN("instruction set " << static_cast<int>(isa) << " not supported here; skipped");
      continue;
    }
    ++checked_sets;
    const rd::Kernels& k = rd::kernels_for(isa);
    for (std::size_t cols : {1u, 7u, 16u, 37u, 64u, 130u})
      for (std::size_t rows : {1u, 3u, 8u, 17u, 80u})
        for (std::size_t n : {1u, 2u, 3u, 4u, 5u, 9u}) {
          INFO(k.name << " rows=" << rows << " cols=" << cols << " n=" << n);
          // (The f32 and f16 products of every set are packed ones, checked in the next test. The
          // row-major matmul_i8 below is the portable loop itself on the x86 sets, which all pack
          // int8 matrices; it is a check of its own on NEON and SDOT.)
          std::vector<float> w(rows * cols), x(n * cols), y_ref(n * rows), y(n * rows);
          for (auto& v : w) v = u(rng);
          for (auto& v : x) v = u(rng);
          // i8: integer dot products are exact in every path; only the final float scaling could
          // differ, and it is the same expression everywhere, so the results must be identical.
          std::vector<std::int8_t> wq(w.size());
          std::vector<float> ws(rows);
          std::vector<std::int32_t> wsum(rows, 0);
          // -128 too: the exporter writes [-127, 127], but a file's bytes are not checked, and the
          // AVX2 packed kernel takes |w| as an unsigned byte (128 must stay 128).
          std::uniform_int_distribution<int> qi(-128, 127);
          for (std::size_t r = 0; r < rows; ++r) {
            ws[r] = 0.01f + 0.001f * static_cast<float>(r);
            for (std::size_t c = 0; c < cols; ++c) {
              wq[r * cols + c] = static_cast<std::int8_t>(qi(rng));
              wsum[r] += wq[r * cols + c];
            }
          }
          std::vector<std::int8_t> xs(n * cols);
          std::vector<std::uint8_t> xu(n * cols);
          std::vector<float> xscale(n);
          rd::quantize_rows(x.data(), n, cols, xs.data(), xu.data(), xscale.data());
          const rd::QuantizedRows q{xs.data(), xu.data(), xscale.data()};
          ref.matmul_i8(wq.data(), ws.data(), wsum.data(), rows, cols, q, n, y_ref.data(), rows);
          k.matmul_i8(wq.data(), ws.data(), wsum.data(), rows, cols, q, n, y.data(), rows);
          for (std::size_t i = 0; i < y.size(); ++i) REQUIRE_THAT(y[i], WithinAbs(y_ref[i], 0.0));
          if (k.matmul_packed_i8 != nullptr) {
            std::vector<std::int8_t> packed(rd::packed_size_i8(rows, cols));
            rd::pack_i8(wq.data(), rows, cols, packed.data());
            std::fill(y.begin(), y.end(), -7.0f);
            k.matmul_packed_i8(packed.data(), ws.data(), wsum.data(), rows, cols, q, n, y.data(), rows);
            for (std::size_t i = 0; i < y.size(); ++i) REQUIRE_THAT(y[i], WithinAbs(y_ref[i], 0.0));
          }
        }
  }
  INFO("best kernels: " << rd::best_kernels().name);
  SUCCEED("checked " << checked_sets << " dispatched kernel sets");
}

// Without GYRE_RUNTIME_ISA the fastest set this CPU supports is used. ctest entries of
// tests/cross/CMakeLists.txt set GYRE_TEST_EXPECT_KERNELS to the set the dispatch must choose on
// the CPU qemu emulates (with and without the dot-product extension, and under each cap).
TEST_CASE("run-time dispatch picks the fastest supported kernels", "[runtime][kernels][dispatch]") {
  const rd::Isa best = rd::best_isa();
  REQUIRE(rd::isa_supported(best));
  REQUIRE(std::string(gyre::runtime::Model::kernel_name()) == rd::best_kernels().name);
  if (const char* want = std::getenv("GYRE_TEST_EXPECT_KERNELS")) {
    REQUIRE(std::string(rd::best_kernels().name) == want);
  } else if (std::getenv("GYRE_RUNTIME_ISA") == nullptr) {
    for (int i = static_cast<int>(best) + 1; i <= static_cast<int>(rd::Isa::kNeonSdot); ++i)
      REQUIRE_FALSE(rd::isa_supported(static_cast<rd::Isa>(i)));
  }
}

TEST_CASE("packed f32 and f16 kernels equal the row-major portable product", "[runtime][kernels]") {
  std::mt19937 rng(2718);
  std::uniform_real_distribution<float> u(-1.0f, 1.0f);
  for (rd::Isa isa : {rd::Isa::kPortable, rd::Isa::kAvx2, rd::Isa::kAvx512, rd::Isa::kNeon}) {
    if (!rd::isa_supported(isa)) continue;
    const rd::Kernels& k = rd::kernels_for(isa);
    for (std::size_t rows : {1u, 15u, 16u, 33u, 64u, 80u, 512u})
      for (std::size_t cols : {1u, 3u, 64u, 129u})
        for (std::size_t n : {1u, 3u, 4u, 9u}) {
          INFO(k.name << " rows=" << rows << " cols=" << cols << " n=" << n);
          std::vector<float> w(rows * cols), x(n * cols), y_ref(n * rows), y(n * rows, -7.0f),
              abs_sum(n * rows, 0.0f);
          for (auto& v : w) v = u(rng);
          for (auto& v : x) v = u(rng);
          for (std::size_t t = 0; t < n; ++t)
            for (std::size_t r = 0; r < rows; ++r)
              for (std::size_t c = 0; c < cols; ++c)
                abs_sum[t * rows + r] += std::fabs(w[r * cols + c] * x[t * cols + c]);
          std::vector<float> packed(rd::packed_size_f32(rows, cols));
          rd::pack_f32(w.data(), rows, cols, packed.data());
          rd::matmul_f32_reference(w.data(), rows, cols, x.data(), n, y_ref.data(), rows);
          k.matmul_packed_f32(packed.data(), rows, cols, x.data(), n, y.data(), rows);
          // Summation order differs only: 1e-6 relative to sum |w x| (a few ulps of float32 per
          // term, Higham 2002, ch. 3).
          for (std::size_t i = 0; i < y.size(); ++i)
            REQUIRE_THAT(y[i], WithinAbs(y_ref[i], 1e-6 * (abs_sum[i] + 1.0f)));
          std::vector<std::uint16_t> wh(w.size()), packed_h(rd::packed_size_f32(rows, cols));
          for (std::size_t i = 0; i < w.size(); ++i) wh[i] = rd::float_to_half(w[i]);
          rd::pack_f16(wh.data(), rows, cols, packed_h.data());
          rd::matmul_f16_reference(wh.data(), rows, cols, x.data(), n, y_ref.data(), rows);
          k.matmul_packed_f16(packed_h.data(), rows, cols, x.data(), n, y.data(), rows);
          for (std::size_t i = 0; i < y.size(); ++i)
            REQUIRE_THAT(y[i], WithinAbs(y_ref[i], 1e-6 * (abs_sum[i] + 1.0f)));
        }
  }
}

// The batched calls rely on this: every output row of a product is summed in the same order
// whether the call has one activation row or many, so a text's result never depends on the other
// texts of its batch. Checked for exact equality, per instruction set, across the kernels'
// multi-row blocks and tails.
TEST_CASE("each output row is the same for any number of rows in the call", "[runtime][kernels]") {
  std::mt19937 rng(4242);
  std::uniform_real_distribution<float> u(-1.0f, 1.0f);
  for (rd::Isa isa : {rd::Isa::kPortable, rd::Isa::kAvx2, rd::Isa::kAvx512, rd::Isa::kAvx512Vnni,
                      rd::Isa::kNeon, rd::Isa::kNeonSdot}) {
    if (!rd::isa_supported(isa)) continue;
    const rd::Kernels& k = rd::kernels_for(isa);
    for (std::size_t rows : {16u, 40u, 80u, 112u, 512u})
      for (std::size_t cols : {3u, 20u, 64u, 130u}) {
        const std::size_t n = 13;  // blocks of 8 and 4 rows plus a tail
        std::vector<float> w(rows * cols), x(n * cols), y_all(n * rows), y_one(rows);
        for (auto& v : w) v = u(rng);
        for (auto& v : x) v = u(rng);
        std::vector<float> packed(rd::packed_size_f32(rows, cols));
        rd::pack_f32(w.data(), rows, cols, packed.data());
        std::vector<std::uint16_t> wh(w.size()), packed_h(rd::packed_size_f32(rows, cols));
        for (std::size_t i = 0; i < w.size(); ++i) wh[i] = rd::float_to_half(w[i]);
        rd::pack_f16(wh.data(), rows, cols, packed_h.data());
        std::vector<std::int8_t> wq(w.size());
        std::vector<float> ws(rows, 0.01f);
        std::vector<std::int32_t> wsum(rows, 0);
        for (std::size_t i = 0; i < w.size(); ++i) {
          wq[i] = static_cast<std::int8_t>(std::lround(w[i] * 127.0f));
          wsum[i / cols] += wq[i];
        }
        std::vector<std::int8_t> packed_q(rd::packed_size_i8(rows, cols));
        rd::pack_i8(wq.data(), rows, cols, packed_q.data());
        std::vector<std::int8_t> xs(n * cols);
        std::vector<std::uint8_t> xu(n * cols);
        std::vector<float> xscale(n);
        rd::quantize_rows(x.data(), n, cols, xs.data(), xu.data(), xscale.data());
        for (int kind = 0; kind < 3; ++kind) {
          if (kind == 2 && k.matmul_packed_i8 == nullptr) continue;
          auto run = [&](std::size_t first, std::size_t count, float* y) {
            if (kind == 0)
              k.matmul_packed_f32(packed.data(), rows, cols, x.data() + first * cols, count, y, rows);
            if (kind == 1)
              k.matmul_packed_f16(packed_h.data(), rows, cols, x.data() + first * cols, count, y, rows);
            if (kind == 2)
              k.matmul_packed_i8(packed_q.data(), ws.data(), wsum.data(), rows, cols,
                                 {xs.data() + first * cols, xu.data() + first * cols, xscale.data() + first},
                                 count, y, rows);
          };
          run(0, n, y_all.data());
          for (std::size_t t = 0; t < n; ++t) {
            run(t, 1, y_one.data());
            INFO(k.name << " kind " << kind << " rows=" << rows << " cols=" << cols << " row " << t);
            REQUIRE(std::equal(y_one.begin(), y_one.end(),
                               y_all.begin() + static_cast<std::ptrdiff_t>(t * rows)));
          }
        }
      }
  }
}

// The quantisation rounds without nearbyint on baseline x86-64 (quantize_rows in kernels.cpp);
// it must give nearbyint's result in the default rounding mode, i.e. IEEE 754 roundTiesToEven
// (C11 7.12.9.3): x / s exactly halfway between integers goes to the even one. Also a zero row
// (scale 0), -0.0, and rows whose width leaves a tail after the 4-wide loop.
TEST_CASE("activation quantisation rounds half to even, as nearbyint", "[runtime][kernels]") {
  const std::size_t cols = 21;  // five groups of 4 and a tail of 1
  std::vector<float> x = {127.0f, 0.5f, 1.5f, 2.5f,  -0.5f, -1.5f, -2.5f, 3.5f,  126.5f, -126.5f, 0.49999997f,
                          -0.0f,  0.0f, 4.5f, 5.5f,  -6.5f, 7.5f,  8.5f,  -9.5f, 10.5f,  11.5f};
  x.resize(2 * cols, 0.0f);  // row 1: all zero
  std::mt19937 rng(99);
  std::uniform_real_distribution<float> u(-3.0f, 3.0f);
  for (std::size_t c = 0; c < 6 * cols; ++c) x.push_back(u(rng));  // rows 2-7
  const std::size_t n = x.size() / cols;
  for (std::size_t width : {std::size_t{1}, std::size_t{3}, std::size_t{4}, std::size_t{5}, cols}) {
    std::vector<float> xw;  // the first `width` columns of each row
    for (std::size_t t = 0; t < n; ++t) xw.insert(xw.end(), x.begin() + t * cols, x.begin() + t * cols + width);
    std::vector<std::int8_t> xs(n * width);
    std::vector<std::uint8_t> xu(n * width);
    std::vector<float> s(n);
    rd::quantize_rows(xw.data(), n, width, xs.data(), xu.data(), s.data());
    for (std::size_t t = 0; t < n; ++t) {
      float max_abs = 0.0f;
      for (std::size_t c = 0; c < width; ++c) max_abs = std::fmax(max_abs, std::fabs(xw[t * width + c]));
      INFO("width " << width << " row " << t);
      REQUIRE(s[t] == max_abs / 127.0f);
      const float inv = s[t] > 0.0f ? 1.0f / s[t] : 0.0f;
      for (std::size_t c = 0; c < width; ++c) {
        const float q = std::fmin(127.0f, std::fmax(-127.0f, std::nearbyint(xw[t * width + c] * inv)));
        REQUIRE(xs[t * width + c] == static_cast<std::int8_t>(q));
        REQUIRE(xu[t * width + c] == static_cast<std::uint8_t>(static_cast<int>(q) + 128));
      }
    }
  }
  // Row 0 at full width: max 127, so s = 1 and x / s = x.
  std::vector<std::int8_t> xs(n * cols);
  std::vector<std::uint8_t> xu(n * cols);
  std::vector<float> s(n);
  rd::quantize_rows(x.data(), n, cols, xs.data(), xu.data(), s.data());
  REQUIRE(s[0] == 1.0f);
  REQUIRE(xs[1] == 0);     // 0.5
  REQUIRE(xs[2] == 2);     // 1.5
  REQUIRE(xs[3] == 2);     // 2.5
  REQUIRE(xs[4] == 0);     // -0.5
  REQUIRE(xs[5] == -2);    // -1.5
  REQUIRE(xs[6] == -2);    // -2.5
  REQUIRE(xs[7] == 4);     // 3.5
  REQUIRE(xs[8] == 126);   // 126.5
  REQUIRE(xs[9] == -126);  // -126.5
  REQUIRE(xs[10] == 0);    // just below 0.5
  REQUIRE(xs[11] == 0);    // -0.0
  REQUIRE(xs[20] == 12);   // 11.5, the tail
  REQUIRE(s[1] == 0.0f);
  for (std::size_t c = 0; c < cols; ++c) REQUIRE(xs[cols + c] == 0);
}

TEST_CASE("activation quantisation is symmetric per row", "[runtime][kernels]") {
  const float x[4] = {0.5f, -1.27f, 0.0f, 0.01f};
  std::int8_t xs[4];
  std::uint8_t xu[4];
  float s;
  rd::quantize_rows(x, 1, 4, xs, xu, &s);
  // scale = max|x| / 127 = 0.01; q = round(x / scale) (Jacob et al. 2018, zero point 0).
  REQUIRE_THAT(s, WithinAbs(0.01, 1e-9));
  REQUIRE(xs[0] == 50);
  REQUIRE(xs[1] == -127);
  REQUIRE(xs[2] == 0);
  REQUIRE(xs[3] == 1);
  REQUIRE(xu[1] == 1);
  REQUIRE(xu[2] == 128);
}

// The allocation tests exist only where operator new can be counted (not under AddressSanitizer),
// and the ICU one only in a runtime built with ICU: no test passes by returning early.
#if GYRE_COUNTING_NEW
#ifdef GYRE_RUNTIME_HAS_ICU
TEST_CASE("no allocations per call with the ICU words tokenizer either", "[runtime][alloc]") {
  REQUIRE(gyre::runtime::tokenizer_has_icu());
  gyre::test::RefModel r;
  r.tokenizer_mode = "words";
  r.normalize = true;
  r.randomize(5);
  const auto bytes = r.file();
  const auto model = gyre::runtime::Model::from_buffer(bytes.data(), bytes.size());
  gyre::runtime::Context ctx(model);
  ctx.classify("W2, w9 unknown w4 W2 w9 unknown!");
  const long before = g_allocations.load();
  for (int rep = 0; rep < 20; ++rep) ctx.classify("W2, w9 unknown w4!");
  const long n = g_allocations.load() - before;
  REQUIRE(n == 0);
}
#endif  // GYRE_RUNTIME_HAS_ICU

TEST_CASE("Context allocates nothing per call after warm-up", "[runtime][alloc]") {
  using gyre::runtime::Context;
  using gyre::runtime::DType;
  using gyre::runtime::Model;
  for (DType dt : {DType::kF32, DType::kI8}) {
    for (const char* task : {"classify", "tag"}) {
      gyre::test::RefModel r;
      r.task = task;
      r.E = 16;
      r.H = 24;
      r.L = 2;
      r.bidir = std::string(task) == "tag";
      r.output = std::string(task) == "tag" ? "crf" : "softmax";
      if (std::string(task) == "tag") r.labels = {"O", "B-a", "I-a"};
      r.randomize(5);
      const auto bytes = r.file(dt);
      const Model model = Model::from_buffer(bytes.data(), bytes.size());
      Context ctx(model);
      const std::vector<std::uint32_t> longest = {2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 2, 3, 4, 5, 6, 7};
      const std::vector<std::uint32_t> shorter = {4, 5, 6};
      const std::vector<std::string> tokens = {"w2", "w9", "unknown", "w4"};
      auto call = [&](const std::vector<std::uint32_t>& ids) {
        if (std::string(task) == "classify") {
          ctx.classify_ids(ids);
          ctx.classify_tokens(tokens);
        } else {
          ctx.tag_ids(ids);
          ctx.tag_tokens(tokens);
        }
      };
      call(longest);  // warm-up
      const long before = g_allocations.load();
      for (int rep = 0; rep < 20; ++rep) {
        call(shorter);
        call(longest);
      }
      const long during = g_allocations.load() - before;  // read before INFO, which allocates
      INFO(task << " dtype " << gyre::runtime::to_string(dt));
      REQUIRE(during == 0);
      if (std::string(task) == "classify") {
        ctx.classify("w2 w9 unknown w4 w2 w9 unknown");
        const long b1 = g_allocations.load();
        for (int rep = 0; rep < 20; ++rep) ctx.classify("w2 w9 unknown w4");
        const long text_path = g_allocations.load() - b1;
        REQUIRE(text_path == 0);  // whitespace tokenizer
        // Words longer than the small-string buffer (15 bytes in libstdc++), a longer text after a
        // shorter one: the token slots dropped by the shorter text keep their buffers for the next.
        const std::string long_text =
            "w2-with-a-long-suffix w9-with-a-long-suffix unknown-and-also-long "
            "w4-with-a-long-suffix w5-with-a-long-suffix w6-with-a-long-suffix";
        const std::string short_text = "w2-with-a-long-suffix w9-with-a-long-suffix";
        ctx.classify(long_text);
        ctx.classify(short_text);
        const long b3 = g_allocations.load();
        for (int rep = 0; rep < 20; ++rep) {
          ctx.classify(short_text);
          ctx.classify(long_text);
        }
        const long long_words = g_allocations.load() - b3;
        REQUIRE(long_words == 0);
        ctx.reset();
        ctx.push_id(3);
        const long b2 = g_allocations.load();
        for (int rep = 0; rep < 20; ++rep) {
          ctx.push_id(4);
          ctx.push("w5");
          ctx.distribution();
        }
        ctx.reset();
        const long stepping = g_allocations.load() - b2;
        REQUIRE(stepping == 0);
      }
    }
  }
}

TEST_CASE("batched calls allocate nothing after warm-up", "[runtime][alloc]") {
  using gyre::Span;
  using gyre::runtime::Context;
  using gyre::runtime::DType;
  using gyre::runtime::Model;
  for (DType dt : {DType::kF32, DType::kF16, DType::kI8}) {
    for (const char* task : {"classify", "tag"}) {
      const bool tag = std::string(task) == "tag";
      gyre::test::RefModel r;
      r.task = task;
      r.E = 16;
      r.H = 24;
      r.L = 2;
      r.bidir = true;
      r.output = tag ? "crf" : "softmax";
      if (tag) r.labels = {"O", "B-a", "I-a"};
      r.randomize(9);
      const auto bytes = r.file(dt);
      const Model model = Model::from_buffer(bytes.data(), bytes.size());
      Context ctx(model);
      const std::vector<std::uint32_t> a = {2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 2, 3}, b = {4, 5, 6}, c = {};
      const std::vector<Span<const std::uint32_t>> large = {a, b, c, a, b, a}, small = {b, c, b};
      const std::vector<std::string> t1 = {"w2", "w9", "unknown", "w4"}, t2 = {"w3"};
      const std::vector<Span<const std::string>> tokens = {t1, t2, t1, {}};
      auto call = [&](const std::vector<Span<const std::uint32_t>>& ids) {
        if (tag) {
          ctx.tag_batch_ids(ids);
          ctx.tag_batch_tokens(tokens);
        } else {
          ctx.classify_batch_ids(ids);
          ctx.classify_batch_tokens(tokens);
        }
      };
      call(large);  // warm-up
      const long before = g_allocations.load();
      for (int rep = 0; rep < 10; ++rep) {
        call(small);
        call(large);
      }
      const long during = g_allocations.load() - before;  // read before INFO, which allocates
      INFO(task << " dtype " << gyre::runtime::to_string(dt));
      REQUIRE(during == 0);
      // Text with the whitespace tokenizer: the same once the largest batch has been seen.
      const std::vector<std::string_view> texts = {"w2 w9 unknown w4 w2", "", "w3 w3"};
      if (tag)
        ctx.tag_batch(texts);
      else
        ctx.classify_batch(texts);
      const long b1 = g_allocations.load();
      for (int rep = 0; rep < 10; ++rep) {
        if (tag)
          ctx.tag_batch(texts);
        else
          ctx.classify_batch(texts);
      }
      const long text_path = g_allocations.load() - b1;
      REQUIRE(text_path == 0);
    }
  }
}

TEST_CASE("a model with an n-gram part allocates nothing per call after warm-up", "[runtime][alloc][ngram]") {
  using gyre::Span;
  // Words longer than a std::string's inline buffer, so that keys (two words and a separator) live
  // on the heap: the part builds each key in one reused string.
  gyre::test::RefModel r;
  r.words = {"descalingservice", "appointmentslot", "kettlerepairs", "marrowbyoffice", "tomorrowmorning"};
  r.V = r.words.size() + 2;
  r.randomize(17);
  std::vector<std::string> keys;
  gyre::runtime::ngram_keys({"descalingservice", "appointmentslot", "kettlerepairs", "outsidevocabulary"}, 3,
                            keys);
  gyre::runtime::ngram_keys({"marrowbyoffice", "tomorrowmorning", "kettlerepairs"}, 3, keys);
  std::sort(keys.begin(), keys.end());
  keys.erase(std::unique(keys.begin(), keys.end()), keys.end());
  std::vector<float> w(keys.size() * r.C());
  for (std::size_t i = 0; i < w.size(); ++i) w[i] = static_cast<float>(i % 7) * 0.25f - 0.75f;
  r.ngram = gyre::runtime::NgramPart(3, keys, w, std::vector<float>(r.C(), 0.1f), 1.0f);
  const auto bytes = r.file();
  const auto model = gyre::runtime::Model::from_buffer(bytes.data(), bytes.size());
  gyre::runtime::Context ctx(model);
  const std::vector<std::string> longest = {"descalingservice",  "appointmentslot", "kettlerepairs",
                                            "outsidevocabulary", "marrowbyoffice",  "tomorrowmorning",
                                            "kettlerepairs",     "descalingservice"};
  const std::vector<std::string> shorter = {"marrowbyoffice", "tomorrowmorning", "kettlerepairs"};
  const std::vector<Span<const std::string>> batch = {longest, shorter, {}, longest};
  // Text: words of at most 15 bytes (the tokenizer keeps a string per token slot, but a shorter
  // text gives up the slots after it, so a longer word in them would be allocated again).
  const std::vector<std::string_view> texts = {
      "kettlerepairs appointmentslot marrowbyoffice", "",
      "marrowbyoffice tomorrowmorning kettlerepairs appointmentslot"};
  auto call = [&] {
    ctx.classify_tokens(shorter);
    ctx.classify_tokens(longest);
    ctx.classify(texts[2]);
    ctx.classify_batch_tokens(batch);
    ctx.classify_batch(texts);
    ctx.reset();
    for (const auto& word : longest) ctx.push(word);
    ctx.distribution();
  };
  call();  // warm-up
  const long before = g_allocations.load();
  for (int rep = 0; rep < 10; ++rep) call();
  const long during = g_allocations.load() - before;
  REQUIRE(during == 0);
}
#endif  // GYRE_COUNTING_NEW

TEST_CASE("vectorised sigmoid and tanh match the C library", "[runtime][kernels]") {
  std::vector<float> xs;
  for (int i = -40000; i <= 40000; ++i) xs.push_back(static_cast<float>(i) * 0.0005f);  // [-20, 20]
  for (float v : {-100.0f, -88.5f, 88.5f, 100.0f, 1e-8f, -1e-8f}) xs.push_back(v);
  for (rd::Isa isa : {rd::Isa::kPortable, rd::Isa::kAvx2, rd::Isa::kAvx512, rd::Isa::kNeon}) {
    if (!rd::isa_supported(isa)) continue;
    const rd::Kernels& k = rd::kernels_for(isa);
    std::vector<float> s = xs, t = xs;
    k.sigmoid(s.data(), s.size());
    k.tanh(t.data(), t.size());
    double max_s = 0, max_t = 0;
    for (std::size_t i = 0; i < xs.size(); ++i) {
      const double x = xs[i];
      max_s = std::max(max_s, std::fabs(s[i] - 1.0 / (1.0 + std::exp(-x))));
      max_t = std::max(max_t, std::fabs(t[i] - std::tanh(x)));
    }
    INFO(k.name << ": max |sigmoid err| " << max_s << ", max |tanh err| " << max_t);
    // ref: the C library in double precision; 5e-7 is ~4 float32 ulps at 1.0.
    REQUIRE(max_s <= 5e-7);
    REQUIRE(max_t <= 5e-7);
  }
}
