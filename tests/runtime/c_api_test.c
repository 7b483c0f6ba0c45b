/* The C interface, compiled as C: classify and tag with the PyTorch fixtures
 * (tests/fixtures/runtime, made by tools/make_runtime_fixtures.py) and check the error paths.
 * Usage: c_api_test FIXTURES_DIR */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "gyre_runtime.h"

static int failures = 0;
#define CHECK(cond)                                                            \
  do {                                                                         \
    if (!(cond)) {                                                             \
      fprintf(stderr, "%s:%d: check failed: %s\n", __FILE__, __LINE__, #cond); \
      ++failures;                                                              \
    }                                                                          \
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
  /* These fixtures carry no temperature: calibration on or off gives the same raw outputs. */
  CHECK(gyre_model_temperature_count(model) == 0);
  CHECK(gyre_model_temperature(model, 0) == 0.0f);
  CHECK(gyre_context_set_calibrated(ctx, 1) == GYRE_OK);
  CHECK(gyre_context_set_calibrated(NULL, 1) == GYRE_ERROR);
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
      {
        /* Softmax classifiers choose the best label only and have no multi-label thresholds. */
        size_t chosen = n;
        CHECK(gyre_classify_chosen_count(ctx) == 1);
        CHECK(gyre_classify_chosen(ctx, 0, &chosen) == GYRE_OK && chosen == best);
        CHECK(gyre_classify_chosen(ctx, 1, &chosen) == GYRE_ERROR);
        CHECK(gyre_model_label_threshold(model, 0) == 0.0f);
      }
      {
        /* Occlusion: one finite score per token of the text, tokens readable. */
        const float* scores = NULL;
        size_t count = 0, k;
        CHECK(gyre_explain(ctx, text, strlen(text), best, &scores, &count) == GYRE_OK);
        CHECK(count >= 1 && scores != NULL);
        for (k = 0; k < count; ++k) CHECK(isfinite(scores[k]) && fabs(scores[k]) <= 1.0);
        CHECK(gyre_token(ctx, 0) != NULL && gyre_token(ctx, count) == NULL);
        CHECK(gyre_explain(ctx, text, strlen(text), n, &scores, &count) == GYRE_ERROR);
        CHECK(strstr(gyre_last_error(), "outside") != NULL);
      }
    } else {
      size_t label = 0, ob = 0, oe = 0;
      CHECK(gyre_tag(ctx, text, strlen(text), &tokens, &spans) == GYRE_OK);
      CHECK(tokens >= 1);
      CHECK(gyre_tag_token(ctx, 0, &label) != NULL);
      CHECK(strncmp(gyre_tag_token(ctx, 0, &label), text, strlen(gyre_tag_token(ctx, 0, &label))) == 0);
      CHECK(label < gyre_model_label_count(model));
      CHECK(gyre_tag_token(ctx, tokens, &label) == NULL);
      /* This model does not normalize (whitespace mode, nfkc off), so each token's bytes in the
       * text are the token itself, and a span's bytes run from its first to its last token. */
      for (i = 0; i < tokens; ++i) {
        size_t tb = 0, te = 0;
        const char* token = gyre_tag_token(ctx, i, &label);
        CHECK(gyre_tag_token_bytes(ctx, i, &tb, &te) == GYRE_OK);
        CHECK(te - tb == strlen(token) && memcmp(text + tb, token, te - tb) == 0);
      }
      CHECK(gyre_tag_token_bytes(ctx, tokens, &ob, &oe) == GYRE_ERROR);
      CHECK(strstr(gyre_last_error(), "no token") != NULL);
      for (i = 0; i < spans; ++i) {
        size_t b = 0, e = 0, sb = 0, se = 0, first_b = 0, first_e = 0, last_b = 0, last_e = 0;
        const char* type = gyre_tag_span(ctx, i, &b, &e);
        CHECK(type != NULL && b < e && e <= tokens);
        CHECK(strcmp(type, "date") == 0 || strcmp(type, "part") == 0);
        CHECK(gyre_tag_span_bytes(ctx, i, &sb, &se) == GYRE_OK);
        CHECK(gyre_tag_token_bytes(ctx, b, &first_b, &first_e) == GYRE_OK);
        CHECK(gyre_tag_token_bytes(ctx, e - 1, &last_b, &last_e) == GYRE_OK);
        CHECK(sb == first_b && se == last_e);
      }
      CHECK(gyre_tag_span_bytes(ctx, spans, &ob, &oe) == GYRE_ERROR);
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

/* Batched calls on all fixture texts of a model plus an empty text: each text's results equal
 * python3-torch's (classifiers, torch_expected.tsv) and the single calls (both kinds). */
static void run_batch(const char* dir, const char* name) {
  char path[4096], line[4096];
  char texts[9][512];
  const char* ptrs[10];
  size_t lengths[10], n = 0, i, j;
  double expected[9][8];
  int src[5];
  size_t expected_n[9];
  FILE* f;
  gyre_model* model = NULL;
  gyre_context* ctx = NULL;
  gyre_context* one = NULL;
  snprintf(path, sizeof path, "%s/%s.gyre", dir, name);
  CHECK(gyre_model_load(path, &model) == GYRE_OK);
  if (!model) return;
  CHECK(gyre_context_new(model, &ctx) == GYRE_OK);
  CHECK(gyre_context_new(model, &one) == GYRE_OK);
  snprintf(path, sizeof path, "%s/torch_expected.tsv", dir);
  f = fopen(path, "r");
  CHECK(f != NULL);
  while (f && n < 8 && fgets(line, sizeof line, f)) {
    char* text;
    char* probs;
    if (strncmp(line, name, strlen(name)) != 0 || line[strlen(name)] != '\t') continue;
    text = line + strlen(name) + 1;
    probs = strchr(text, '\t');
    *probs++ = '\0';
    snprintf(texts[n], sizeof texts[n], "%s", text);
    expected_n[n] = 0;
    while (expected_n[n] < 8 && *probs && *probs != '\n' && *probs != ';') {
      char* end = probs;
      expected[n][expected_n[n]] = strtod(probs, &end);
      if (end == probs) break;
      ++expected_n[n];
      probs = end;
    }
    ++n;
  }
  if (f) fclose(f);
  CHECK(n == 4);
  if (n != 4) return;
  /* Batch rows 0, 1, 3, 4 hold fixture rows 0, 1, 2, 3 (src); row 2 is an empty text (NULL with
   * length 0). */
  {
    static const int src_of[5] = {0, 1, -1, 2, 3};
    for (i = 0; i < 5; ++i) src[i] = src_of[i];
  }
  for (i = 0; i < 5; ++i) {
    ptrs[i] = src[i] < 0 ? NULL : texts[src[i]];
    lengths[i] = src[i] < 0 ? 0 : strlen(texts[src[i]]);
  }
  n = 5;
  if (gyre_model_task(model) == GYRE_TASK_CLASSIFY) {
    CHECK(gyre_classify_batch(ctx, ptrs, lengths, n) == GYRE_OK);
    for (i = 0; i < n; ++i) {
      const float* p = NULL;
      const float* q = NULL;
      size_t count = 0, best = 0, count1 = 0, best1 = 0;
      CHECK(gyre_classify_batch_result(ctx, i, &p, &count, &best) == GYRE_OK);
      CHECK(gyre_classify(one, ptrs[i], lengths[i], &q, &count1, &best1) == GYRE_OK);
      CHECK(count == gyre_model_label_count(model) && count == count1 && best == best1);
      for (j = 0; j < count; ++j) CHECK(fabs(p[j] - q[j]) <= 1e-5);
      if (src[i] >= 0) { /* ref: python3-torch float64 (torch_expected.tsv) */
        CHECK(expected_n[src[i]] == count);
        for (j = 0; j < count && j < expected_n[src[i]]; ++j) CHECK(fabs(p[j] - expected[src[i]][j]) <= 1e-5);
      }
    }
    {
      const float* p = NULL;
      size_t count = 0, best = 0;
      CHECK(gyre_classify_batch_result(ctx, n, &p, &count, &best) == GYRE_ERROR);
      CHECK(strstr(gyre_last_error(), "no text") != NULL);
      CHECK(gyre_tag_batch(ctx, ptrs, lengths, n) == GYRE_ERROR);
      CHECK(strstr(gyre_last_error(), "classifier") != NULL);
      /* A failed call leaves no results to read. */
      CHECK(gyre_classify_batch_result(ctx, 0, &p, &count, &best) == GYRE_ERROR);
    }
  } else {
    CHECK(gyre_tag_batch(ctx, ptrs, lengths, n) == GYRE_OK);
    for (i = 0; i < n; ++i) {
      size_t tokens = 0, spans = 0, tokens1 = 0, spans1 = 0, ob = 0, oe = 0;
      CHECK(gyre_tag_batch_counts(ctx, i, &tokens, &spans) == GYRE_OK);
      CHECK(gyre_tag(one, ptrs[i], lengths[i], &tokens1, &spans1) == GYRE_OK);
      CHECK(tokens == tokens1 && spans == spans1);
      CHECK((src[i] < 0) == (tokens == 0));
      for (j = 0; j < tokens; ++j) {
        size_t label = 0, label1 = 0, b = 0, e = 0, b1 = 0, e1 = 0;
        const char* t = gyre_tag_batch_token(ctx, i, j, &label);
        const char* t1 = gyre_tag_token(one, j, &label1);
        CHECK(t != NULL && t1 != NULL && strcmp(t, t1) == 0 && label == label1);
        CHECK(gyre_tag_batch_token_bytes(ctx, i, j, &b, &e) == GYRE_OK);
        CHECK(gyre_tag_token_bytes(one, j, &b1, &e1) == GYRE_OK);
        CHECK(b == b1 && e == e1);
      }
      for (j = 0; j < spans; ++j) {
        size_t b = 0, e = 0, b1 = 0, e1 = 0, sb = 0, se = 0, sb1 = 0, se1 = 0;
        const char* type = gyre_tag_batch_span(ctx, i, j, &b, &e);
        const char* type1 = gyre_tag_span(one, j, &b1, &e1);
        CHECK(type != NULL && type1 != NULL && strcmp(type, type1) == 0 && b == b1 && e == e1);
        CHECK(gyre_tag_batch_span_bytes(ctx, i, j, &sb, &se) == GYRE_OK);
        CHECK(gyre_tag_span_bytes(one, j, &sb1, &se1) == GYRE_OK);
        CHECK(sb == sb1 && se == se1);
      }
      CHECK(gyre_tag_batch_token(ctx, i, tokens, NULL) == NULL);
      CHECK(gyre_tag_batch_span(ctx, i, spans, NULL, NULL) == NULL);
      CHECK(gyre_tag_batch_token_bytes(ctx, i, tokens, &ob, &oe) == GYRE_ERROR);
      CHECK(strstr(gyre_last_error(), "no token") != NULL);
      CHECK(gyre_tag_batch_span_bytes(ctx, i, spans, &ob, &oe) == GYRE_ERROR);
    }
    {
      size_t tokens = 0, spans = 0;
      CHECK(gyre_tag_batch_counts(ctx, n, &tokens, &spans) == GYRE_ERROR);
      CHECK(strstr(gyre_last_error(), "no text") != NULL);
    }
  }
  /* Ill-formed UTF-8 in one text: refused, the message names it. */
  {
    const char* bad[2] = {"t2", "t\xC3"};
    const size_t bad_len[2] = {2, 2};
    if (gyre_model_task(model) == GYRE_TASK_CLASSIFY)
      CHECK(gyre_classify_batch(ctx, bad, bad_len, 2) == GYRE_ERROR);
    else
      CHECK(gyre_tag_batch(ctx, bad, bad_len, 2) == GYRE_ERROR);
    CHECK(strstr(gyre_last_error(), "text 1: invalid UTF-8 at byte 2") != NULL);
    CHECK(gyre_classify_batch(ctx, NULL, NULL, 2) == GYRE_ERROR);
    CHECK(strstr(gyre_last_error(), "must not be NULL") != NULL);
    CHECK(gyre_classify_batch(NULL, bad, bad_len, 2) == GYRE_ERROR);
    bad[1] = NULL;
    CHECK(gyre_tag_batch(ctx, bad, bad_len, 2) == GYRE_ERROR);
    CHECK(strstr(gyre_last_error(), "text 1: NULL") != NULL);
  }
  gyre_context_free(one);
  gyre_context_free(ctx);
  gyre_model_free(model);
}

int main(int argc, char** argv) {
  gyre_model* model = NULL;
  gyre_context* ctx = NULL;
  const float* d = NULL;
  const float* p = NULL;
  size_t n = 0, best = 0;
  static unsigned char junk[256];
  if (argc != 2) {
    fprintf(stderr, "usage: %s FIXTURES_DIR\n", argv[0]);
    return 2;
  }
  CHECK(run_model(argv[1], "torch_lstm_uni_last") == 4);
  CHECK(run_model(argv[1], "torch_gru_bi_tag") == 4);
  run_batch(argv[1], "torch_lstm_uni_last");
  run_batch(argv[1], "torch_lstm_bi2_mean");
  run_batch(argv[1], "torch_gru_uni2_max");
  run_batch(argv[1], "torch_gru_bi_tag");

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
    /* A token is UTF-8 as text is: the same refusal as gyre_classify, bytes counted from 1. */
    CHECK(gyre_stream_push(ctx, "t\xC3", 2, &d) == GYRE_ERROR);
    CHECK(strstr(gyre_last_error(), "invalid UTF-8 at byte 2") != NULL);
    CHECK(gyre_classify(ctx, "t\xC3", 2, &p, &n, &best) == GYRE_ERROR);
    CHECK(strstr(gyre_last_error(), "invalid UTF-8 at byte 2") != NULL);
    gyre_context_free(ctx);
  }

  /* Every accessor checks a NULL model instead of crashing. */
  CHECK(gyre_model_task(NULL) == GYRE_TASK_INVALID);
  CHECK(strstr(gyre_last_error(), "must not be NULL") != NULL);
  CHECK(gyre_model_label_count(NULL) == 0);
  CHECK(gyre_model_label(NULL, 0) == NULL);

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
