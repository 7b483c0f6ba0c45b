#pragma once
// Counts calls to malloc in the executable that includes this header: it defines malloc itself
// (glibc exports the real allocator as __libc_malloc), so include it from ONE source file of a
// test executable only. GYRE_COUNT_MALLOC is 0 where counting is unavailable (AddressSanitizer
// owns malloc; non-glibc systems); tests then check what they can without it.
// Single-threaded use: set g_counting around the code under test and read g_mallocs.

#include <cstddef>

#if defined(__SANITIZE_ADDRESS__)
#define GYRE_COUNT_MALLOC 0
#elif defined(__has_feature)
#if __has_feature(address_sanitizer)
#define GYRE_COUNT_MALLOC 0
#endif
#endif
#ifndef GYRE_COUNT_MALLOC
#if defined(__GLIBC__) || defined(__linux__)
#define GYRE_COUNT_MALLOC 1
#else
#define GYRE_COUNT_MALLOC 0
#endif
#endif

#if GYRE_COUNT_MALLOC
namespace {
bool g_counting = false;  // single-threaded test
std::size_t g_mallocs = 0;
}  // namespace
extern "C" void* __libc_malloc(std::size_t size);  // NOLINT: glibc's allocator entry point
extern "C" void* malloc(std::size_t size) {        // NOLINT
  if (g_counting) ++g_mallocs;
  return __libc_malloc(size);
}
#endif
