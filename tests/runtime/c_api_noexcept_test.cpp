// The C interface used from C++ compiled with -fno-exceptions (as many embedded projects build):
// every function is noexcept, failures come back as status codes with a per-thread message, and
// nothing thrown inside the runtime reaches the caller. Usage: c_api_noexcept_test FIXTURES_DIR
// Run by ctest as "runtime: C API from C++ built with -fno-exceptions" (tests/runtime/extra.cmake).
#if defined(__cpp_exceptions) || defined(__EXCEPTIONS)
#error "this test must be compiled with -fno-exceptions"
#endif

#include <cmath>
#include <cstdio>
#include <cstring>
#include <fstream>
#include <iterator>
#include <string>
#include <thread>
#include <vector>

#include "gyre_runtime.h"

// Each declaration carries noexcept in C++ (GYRE_NOEXCEPT): checked at compile time.
static_assert(noexcept(gyre_last_error()));
static_assert(noexcept(gyre_model_load(nullptr, nullptr)));
static_assert(noexcept(gyre_model_load_buffer(nullptr, 0, nullptr)));
static_assert(noexcept(gyre_model_free(nullptr)));
static_assert(noexcept(gyre_model_task(nullptr)));
static_assert(noexcept(gyre_model_label_count(nullptr)));
static_assert(noexcept(gyre_model_label(nullptr, 0)));
static_assert(noexcept(gyre_model_temperature_count(nullptr)));
static_assert(noexcept(gyre_model_temperature(nullptr, 0)));
static_assert(noexcept(gyre_model_label_threshold(nullptr, 0)));
static_assert(noexcept(gyre_context_new(nullptr, nullptr)));
static_assert(noexcept(gyre_context_set_calibrated(nullptr, 0)));
static_assert(noexcept(gyre_context_free(nullptr)));
static_assert(noexcept(gyre_classify(nullptr, nullptr, 0, nullptr, nullptr, nullptr)));
static_assert(noexcept(gyre_classify_chosen_count(nullptr)));
static_assert(noexcept(gyre_classify_chosen(nullptr, 0, nullptr)));
static_assert(noexcept(gyre_tag(nullptr, nullptr, 0, nullptr, nullptr)));
static_assert(noexcept(gyre_tag_token(nullptr, 0, nullptr)));
static_assert(noexcept(gyre_tag_span(nullptr, 0, nullptr, nullptr)));
static_assert(noexcept(gyre_stream_reset(nullptr)));
static_assert(noexcept(gyre_stream_push(nullptr, nullptr, 0, nullptr)));
static_assert(noexcept(gyre_explain(nullptr, nullptr, 0, 0, nullptr, nullptr)));
static_assert(noexcept(gyre_token(nullptr, 0)));
static_assert(noexcept(gyre_classify_batch(nullptr, nullptr, nullptr, 0)));
static_assert(noexcept(gyre_classify_batch_result(nullptr, 0, nullptr, nullptr, nullptr)));
static_assert(noexcept(gyre_tag_batch(nullptr, nullptr, nullptr, 0)));
static_assert(noexcept(gyre_tag_batch_counts(nullptr, 0, nullptr, nullptr)));
static_assert(noexcept(gyre_tag_batch_token(nullptr, 0, 0, nullptr)));
static_assert(noexcept(gyre_tag_batch_span(nullptr, 0, 0, nullptr, nullptr)));
static_assert(noexcept(gyre_tag_batch_token_bytes(nullptr, 0, 0, nullptr, nullptr)));
static_assert(noexcept(gyre_tag_batch_span_bytes(nullptr, 0, 0, nullptr, nullptr)));

namespace {
int failures = 0;
void check(bool ok, const char* what, int line) {
  if (!ok) {
    std::fprintf(stderr, "c_api_noexcept_test.cpp:%d: check failed: %s (last error: \"%s\")\n", line, what,
                 gyre_last_error());
    ++failures;
  }
}
#define CHECK(cond) check((cond), #cond, __LINE__)
bool contains(const char* s, const char* part) {
  return s != nullptr && std::strstr(s, part) != nullptr;
}
}  // namespace

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: %s FIXTURES_DIR\n", argv[0]);
    return 2;
  }
  const std::string dir = argv[1];

  // A model read into memory by the application and loaded from the buffer.
  std::ifstream in(dir + "/torch_lstm_uni_last.gyre", std::ios::binary);
  const std::vector<char> bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  CHECK(!bytes.empty());
  gyre_model* model = nullptr;
  CHECK(gyre_model_load_buffer(bytes.data(), bytes.size(), &model) == GYRE_OK);
  gyre_context* ctx = nullptr;
  CHECK(gyre_context_new(model, &ctx) == GYRE_OK);
  const float* p = nullptr;
  size_t n = 0, best = 0;
  CHECK(gyre_classify(ctx, "t16 t19", 7, &p, &n, &best) == GYRE_OK);
  // ref: tests/fixtures/runtime/torch_expected.tsv (python3-torch float64), "t16 t19".
  CHECK(n == 3 && std::fabs(p[0] - 0.356430526) <= 1e-5 && std::fabs(p[1] - 0.455523937) <= 1e-5 &&
        best == 1);

  // Exceptions thrown inside the runtime (ill-formed UTF-8, wrong task, corrupt file, missing
  // file) arrive as status codes and messages.
  CHECK(gyre_classify(ctx, "t\xC3", 2, &p, &n, &best) == GYRE_ERROR);
  CHECK(contains(gyre_last_error(), "invalid UTF-8 at byte 2"));
  size_t tokens = 0, spans = 0;
  CHECK(gyre_tag(ctx, "t2", 2, &tokens, &spans) == GYRE_ERROR);
  CHECK(gyre_tag_token(ctx, 0, nullptr) == nullptr);
  // A batched call: the runtime's exception for ill-formed UTF-8 in text 1 arrives as a status.
  const char* batch[2] = {"t16 t19", "t\xC3"};
  const size_t batch_len[2] = {7, 2};
  CHECK(gyre_classify_batch(ctx, batch, batch_len, 2) == GYRE_ERROR);
  CHECK(contains(gyre_last_error(), "text 1: invalid UTF-8 at byte 2"));
  CHECK(gyre_classify_batch(ctx, batch, batch_len, 1) == GYRE_OK);
  CHECK(gyre_classify_batch_result(ctx, 0, &p, &n, &best) == GYRE_OK);
  // ref: tests/fixtures/runtime/torch_expected.tsv (python3-torch float64), "t16 t19".
  CHECK(n == 3 && std::fabs(p[1] - 0.455523937) <= 1e-5 && best == 1);
  std::vector<char> damaged = bytes;
  damaged[damaged.size() / 2] = static_cast<char>(damaged[damaged.size() / 2] ^ 0x5A);
  gyre_model* bad = nullptr;
  CHECK(gyre_model_load_buffer(damaged.data(), damaged.size(), &bad) == GYRE_ERROR && bad == nullptr);
  CHECK(std::strlen(gyre_last_error()) > 0);
  CHECK(gyre_model_load("/nonexistent/model.gyre", &bad) == GYRE_ERROR && bad == nullptr);
  CHECK(contains(gyre_last_error(), "cannot open"));

  // A message longer than the buffer is cut to GYRE_ERROR_MESSAGE_MAX - 1 bytes.
  const std::string long_path = "/nonexistent/" + std::string(3 * GYRE_ERROR_MESSAGE_MAX, 'x') + ".gyre";
  CHECK(gyre_model_load(long_path.c_str(), &bad) == GYRE_ERROR);
  CHECK(std::strlen(gyre_last_error()) == GYRE_ERROR_MESSAGE_MAX - 1);

  // The message is per thread: a failure on another thread leaves this one's untouched.
  CHECK(gyre_classify(ctx, "t\xC3", 2, &p, &n, &best) == GYRE_ERROR);
  std::string other;
  std::thread([&] {
    gyre_model* none = nullptr;
    if (gyre_model_load("/nonexistent/other.gyre", &none) == GYRE_ERROR) other = gyre_last_error();
  }).join();
  CHECK(contains(other.c_str(), "other.gyre"));
  CHECK(contains(gyre_last_error(), "invalid UTF-8 at byte 2"));

  gyre_context_free(ctx);
  gyre_model_free(model);
  if (failures) {
    std::fprintf(stderr, "%d checks failed\n", failures);
    return 1;
  }
  std::printf("C API without exceptions: all checks passed\n");
  return 0;
}
