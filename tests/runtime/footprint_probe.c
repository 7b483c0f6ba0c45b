/* What the runtime adds to a program's code: a minimal C program that loads a model, classifies
 * one text and prints the best label through gyre_runtime.h. Built twice (tests/runtime/extra.cmake,
 * tests/cross/CMakeLists.txt): as is, linked with the static runtime, and with
 * -DGYRE_FOOTPRINT_BASELINE, the same program with every runtime call left out. The difference of
 * their loaded sections is the runtime's share (tools/footprint.py). */
#include <stdio.h>
#include <string.h>

#ifndef GYRE_FOOTPRINT_BASELINE
#include "gyre_runtime.h"
#endif

int main(int argc, char** argv) {
  const char* text = argc > 2 ? argv[2] : "";
  if (argc < 2) {
    fprintf(stderr, "usage: %s MODEL [TEXT]\n", argv[0]);
    return 2;
  }
#ifndef GYRE_FOOTPRINT_BASELINE
  {
    gyre_model* model = NULL;
    gyre_context* ctx = NULL;
    const float* p = NULL;
    size_t n = 0, best = 0;
    if (gyre_model_load(argv[1], &model) != GYRE_OK || gyre_context_new(model, &ctx) != GYRE_OK ||
        gyre_classify(ctx, text, strlen(text), &p, &n, &best) != GYRE_OK) {
      fprintf(stderr, "%s\n", gyre_last_error());
      return 1;
    }
    printf("%s\t%.4f\n", gyre_model_label(model, best), p[best]);
    gyre_context_free(ctx);
    gyre_model_free(model);
  }
#else
  printf("%s\t%zu\n", argv[1], strlen(text));
#endif
  return 0;
}
