/* gyre_runtime.h: C interface to the gyre embedded runtime (C89-compatible declarations).
 *
 *   gyre_model* model = NULL;
 *   if (gyre_model_load("intents.gyre", &model) != GYRE_OK) {
 *     fprintf(stderr, "%s\n", gyre_last_error());
 *     return 1;
 *   }
 *   gyre_context* ctx = NULL;
 *   gyre_context_new(model, &ctx);
 *   const float* probs; size_t n, best;
 *   gyre_classify(ctx, text, strlen(text), &probs, &n, &best);
 *   printf("%s\t%.4f\n", gyre_model_label(model, best), probs[best]);
 *   gyre_context_free(ctx);
 *   gyre_model_free(model);
 *
 * Handles are opaque. A model is immutable and may be used from several threads at once; a
 * context belongs to one thread at a time. Pointers returned by gyre_classify, gyre_tag and the
 * accessors stay valid until the next call on the same context (or until the model is freed, for
 * label strings). Every function that can fail returns a gyre_status; on failure
 * gyre_last_error() describes the problem (per thread, valid until the next failing call).
 * Text is UTF-8 with an explicit length (it need not be NUL-terminated).
 */
#ifndef GYRE_RUNTIME_H
#define GYRE_RUNTIME_H

#include <stddef.h>

#ifdef __cplusplus
extern "C" {
#endif

typedef struct gyre_model gyre_model;
typedef struct gyre_context gyre_context;

typedef enum gyre_status {
  GYRE_OK = 0,
  GYRE_ERROR = 1,        /* bad input, corrupt file, misuse: see gyre_last_error() */
  GYRE_OUT_OF_MEMORY = 2
} gyre_status;

typedef enum gyre_task { GYRE_TASK_CLASSIFY = 0, GYRE_TASK_TAG = 1 } gyre_task;

/* Message of the last failure on this thread ("" if none). */
const char* gyre_last_error(void);

/* Loading. The buffer variant copies nothing: data must outlive the model. */
gyre_status gyre_model_load(const char* path, gyre_model** out);
gyre_status gyre_model_load_buffer(const void* data, size_t size, gyre_model** out);
void gyre_model_free(gyre_model* model); /* NULL is ignored; contexts keep the weights alive */

gyre_task gyre_model_task(const gyre_model* model);
size_t gyre_model_label_count(const gyre_model* model);
/* NUL-terminated label name, or NULL if index is out of range. */
const char* gyre_model_label(const gyre_model* model, size_t index);

gyre_status gyre_context_new(const gyre_model* model, gyre_context** out);
void gyre_context_free(gyre_context* context);

/* Classifier: probabilities[0..count) in label order, best = arg-max label. */
gyre_status gyre_classify(gyre_context* context, const char* text, size_t length, const float** probabilities,
                          size_t* count, size_t* best);

/* Tagger: tokenizes and tags; then read tokens, tags and spans with the accessors below. */
gyre_status gyre_tag(gyre_context* context, const char* text, size_t length, size_t* token_count, size_t* span_count);
/* Token i of the last gyre_tag call (NUL-terminated) and its label index; NULL if out of range. */
const char* gyre_tag_token(const gyre_context* context, size_t i, size_t* label);
/* Span i of the last gyre_tag call: tokens [begin, end), NUL-terminated type; NULL if out of range. */
const char* gyre_tag_span(const gyre_context* context, size_t i, size_t* begin, size_t* end);

/* Step-wise (unidirectional models): reset, then push tokens (not text) one at a time; the
 * returned distribution has gyre_model_label_count() entries. */
gyre_status gyre_stream_reset(gyre_context* context);
gyre_status gyre_stream_push(gyre_context* context, const char* token, size_t length, const float** distribution);

#ifdef __cplusplus
}
#endif

#endif /* GYRE_RUNTIME_H */
