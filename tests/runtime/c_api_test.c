/* The C interface, compiled as C: classify and tag with the PyTorch fixtures
 * (tests/fixtures/runtime, made by tools/make_runtime_fixtures.py) and check the error paths.
 * Usage: c_api_test FIXTURES_DIR */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "gyre_runtime.h"

static int failures = 0;
#define CHECK(cond)                                                   \
  do {                                                                \
    if (!(cond)) {                                                    \
      fprintf(stderr, "%s:%d: check failed: %s\n", __FILE__, __LINE__, #cond); \
      ++failures;                                                     \
    }                                                                 \
  } while (0)

static int run_model(const char* dir, const char* name) {
  char path[4096], line[4096];
  FILE* f;
  gyre_model* model = NULL;
  gyre_context* ctx = NULL;
  int rows = 0;
  snprintf(path, sizeof path, "%s/%s.gyre", dir, name);
  if (gyre_model_load(path, &model) != GYRE_OK) {
    fprintf(stderr, "load failed: %s\n", gyre_last_error());
    return -1;
  }
  CHECK(gyre_context_new(model, &ctx) == GYRE_OK);
  snprintf(path, sizeof path, "%s/torch_expected.tsv", dir);
  f = fopen(path, "r");
  CHECK(f != NULL);
  while (f && fgets(line, sizeof line, f)) {
    char* text;
    char* probs;
    size_t n = 0, best = 0, i, tokens = 0, spans = 0;
    const float* p = NULL;
    if (strncmp(line, name, strlen(name)) != 0 || line[strlen(name)] != '\t') continue;
    text = line + strlen(name) + 1;
    probs = strchr(text, '\t');
    *probs++ = '\0';
    if (gyre_model_task(model) == GYRE_TASK_CLASSIFY) {
      char* end = probs;
      CHECK(gyre_classify(ctx, text, strlen(text), &p, &n, &best) == GYRE_OK);
      CHECK(n == gyre_model_label_count(model));
      for (i = 0; i < n; ++i) {
        double want = strtod(end, &end);
        CHECK(fabs(p[i] - want) <= 1e-5); /* ref: python3-torch float64 */
        if (p[i] > p[best]) CHECK(0);
      }
    } else {
      size_t label = 0;
      CHECK(gyre_tag(ctx, text, strlen(text), &tokens, &spans) == GYRE_OK);
      CHECK(tokens >= 1);
      CHECK(gyre_tag_token(ctx, 0, &label) != NULL);
      CHECK(strncmp(gyre_tag_token(ctx, 0, &label), text, strlen(gyre_tag_token(ctx, 0, &label))) == 0);
      CHECK(label < gyre_model_label_count(model));
      CHECK(gyre_tag_token(ctx, tokens, &label) == NULL);
      for (i = 0; i < spans; ++i) {
        size_t b = 0, e = 0;
        const char* type = gyre_tag_span(ctx, i, &b, &e);
        CHECK(type != NULL && b < e && e <= tokens);
        CHECK(strcmp(type, "date") == 0 || strcmp(type, "part") == 0);
      }
      CHECK(gyre_classify(ctx, text, strlen(text), &p, &n, &best) == GYRE_ERROR);
      CHECK(strstr(gyre_last_error(), "tagger") != NULL);
    }
    ++rows;
  }
  if (f) fclose(f);
  gyre_context_free(ctx);
  gyre_model_free(model);
  return rows;
}

int main(int argc, char** argv) {
  gyre_model* model = NULL;
  gyre_context* ctx = NULL;
  const float* d = NULL;
  static unsigned char junk[256];
  if (argc != 2) {
    fprintf(stderr, "usage: %s FIXTURES_DIR\n", argv[0]);
    return 2;
  }
  CHECK(run_model(argv[1], "torch_lstm_uni_last") == 4);
  CHECK(run_model(argv[1], "torch_gru_bi_tag") == 4);

  /* Step-wise on a unidirectional model. */
  {
    char path[4096];
    snprintf(path, sizeof path, "%s/torch_lstm_uni_last.gyre", argv[1]);
    CHECK(gyre_model_load(path, &model) == GYRE_OK);
    CHECK(gyre_context_new(model, &ctx) == GYRE_OK);
    gyre_model_free(model); /* the context keeps the weights alive */
    CHECK(gyre_stream_reset(ctx) == GYRE_OK);
    CHECK(gyre_stream_push(ctx, "t2", 2, &d) == GYRE_OK);
    /* ref: torch_expected.tsv, "torch_lstm_uni_last<TAB>t2": 0.315395538 0.432718295 0.251886167 */
    CHECK(fabs(d[0] - 0.315395538) <= 1e-5 && fabs(d[1] - 0.432718295) <= 1e-5);
    gyre_context_free(ctx);
  }

  /* Errors are reported, not crashed on. */
  CHECK(gyre_model_load("/nonexistent/model.gyre", &model) == GYRE_ERROR);
  CHECK(model == NULL);
  CHECK(strstr(gyre_last_error(), "cannot open") != NULL);
  CHECK(gyre_model_load_buffer(junk, sizeof junk, &model) == GYRE_ERROR);
  CHECK(strstr(gyre_last_error(), "not a gyre model file") != NULL);
  CHECK(gyre_model_load(NULL, &model) == GYRE_ERROR);

  if (failures) {
    fprintf(stderr, "%d checks failed\n", failures);
    return 1;
  }
  printf("C API: all checks passed\n");
  return 0;
}
