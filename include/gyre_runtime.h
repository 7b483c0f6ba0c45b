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
 * Text and tokens are UTF-8 with an explicit length (they need not be NUL-terminated); ill-formed
 * UTF-8 is refused with GYRE_ERROR, and the message counts bytes from 1 ("at byte 3").
 *
 * No function here throws or aborts on bad input or on running out of memory, so the header can
 * be used from C and from C++ compiled with -fno-exceptions: in C++ every declaration is
 * noexcept (GYRE_NOEXCEPT) and each function turns any failure inside the runtime into a
 * gyre_status (GYRE_ERROR, GYRE_OUT_OF_MEMORY) and a message in a per-thread buffer of fixed size
 * (no allocation on the error path; messages longer than GYRE_ERROR_MESSAGE_MAX - 1 bytes are cut).
 */
#ifndef GYRE_RUNTIME_H
#define GYRE_RUNTIME_H

#include <stddef.h>

#if defined(__cplusplus) && __cplusplus >= 201103L
#define GYRE_NOEXCEPT noexcept
#else
#define GYRE_NOEXCEPT
#endif

/* Size of the per-thread buffer behind gyre_last_error(), terminating NUL included. */
#define GYRE_ERROR_MESSAGE_MAX 512

#ifdef __cplusplus
extern "C" {
#endif

typedef struct gyre_model gyre_model;
typedef struct gyre_context gyre_context;

typedef enum gyre_status {
  GYRE_OK = 0,
  GYRE_ERROR = 1, /* bad input, corrupt file, misuse: see gyre_last_error() */
  GYRE_OUT_OF_MEMORY = 2
} gyre_status;

typedef enum gyre_task { GYRE_TASK_INVALID = -1, GYRE_TASK_CLASSIFY = 0, GYRE_TASK_TAG = 1 } gyre_task;

/* Message of the last failure on this thread ("" if none). */
const char* gyre_last_error(void) GYRE_NOEXCEPT;

/* Loading. The buffer variant copies nothing: data must outlive the model. */
gyre_status gyre_model_load(const char* path, gyre_model** out) GYRE_NOEXCEPT;
gyre_status gyre_model_load_buffer(const void* data, size_t size, gyre_model** out) GYRE_NOEXCEPT;
void gyre_model_free(gyre_model* model) GYRE_NOEXCEPT; /* NULL is ignored; contexts keep the weights alive */

/* A NULL model gives GYRE_TASK_INVALID, 0 labels and NULL label names (gyre_last_error() says why). */
gyre_task gyre_model_task(const gyre_model* model) GYRE_NOEXCEPT;
size_t gyre_model_label_count(const gyre_model* model) GYRE_NOEXCEPT;
/* NUL-terminated label name, or NULL if index is out of range. */
const char* gyre_model_label(const gyre_model* model, size_t index) GYRE_NOEXCEPT;

/* Temperature scaling fitted on dev when the model was trained (Guo et al. 2017): how many
 * temperatures the file holds (0: none; 1 for softmax/CRF outputs; one per label for multi-label)
 * and value i (0 when out of range). */
size_t gyre_model_temperature_count(const gyre_model* model) GYRE_NOEXCEPT;
float gyre_model_temperature(const gyre_model* model, size_t index) GYRE_NOEXCEPT;

/* Multi-label classifiers: the threshold label index is chosen at (probability >= threshold): the
 * label's own threshold, tuned on dev when the model was trained, or the model's multi-label
 * threshold when the file holds none. 0 for other models or when index is out of range. */
float gyre_model_label_threshold(const gyre_model* model, size_t index) GYRE_NOEXCEPT;

/* 1 when the classifier has an n-gram part (docs/model-format.md "N-gram part"): the scores of a
 * linear model over the text's word n-grams, added to the network's logits before the softmax and
 * the temperature. gyre_classify and gyre_classify_batch apply it (they have the words); 0 for a
 * model without one or NULL. */
int gyre_model_has_ngram_part(const gyre_model* model) GYRE_NOEXCEPT;

gyre_status gyre_context_new(const gyre_model* model, gyre_context** out) GYRE_NOEXCEPT;
/* Probabilities from this context use the model's temperature (on != 0, the default) or are the
 * raw model outputs (on == 0). Never changes the best label, a tag or a span. */
gyre_status gyre_context_set_calibrated(gyre_context* context, int on) GYRE_NOEXCEPT;
void gyre_context_free(gyre_context* context) GYRE_NOEXCEPT;

/* Classifier: probabilities[0..count) in label order, best = arg-max label. */
gyre_status gyre_classify(gyre_context* context, const char* text, size_t length, const float** probabilities,
                          size_t* count, size_t* best) GYRE_NOEXCEPT;

/* Labels chosen by the last gyre_classify on this context (a batched call clears them; its own
 * results carry probabilities), in label order: the best label
 * (softmax), or every label whose probability reaches its threshold (multi-label, see
 * gyre_model_label_threshold; possibly none). Count, then label i (GYRE_ERROR if out of range or
 * there was no gyre_classify call). */
size_t gyre_classify_chosen_count(const gyre_context* context) GYRE_NOEXCEPT;
gyre_status gyre_classify_chosen(const gyre_context* context, size_t i, size_t* label) GYRE_NOEXCEPT;

/* Tagger: tokenizes and tags; then read tokens, tags and spans with the accessors below. */
gyre_status gyre_tag(gyre_context* context, const char* text, size_t length, size_t* token_count,
                     size_t* span_count) GYRE_NOEXCEPT;
/* Token i of the last gyre_tag call (NUL-terminated) and its label index; NULL if out of range. */
const char* gyre_tag_token(const gyre_context* context, size_t i, size_t* label) GYRE_NOEXCEPT;
/* Span i of the last gyre_tag call: tokens [begin, end), NUL-terminated type; NULL if out of range. */
const char* gyre_tag_span(const gyre_context* context, size_t i, size_t* begin, size_t* end) GYRE_NOEXCEPT;
/* Where token i / span i of the last gyre_tag call lies in the text given to it: bytes
 * [*byte_begin, *byte_end), before normalization (the text as the user wrote it, e.g. "１４/03"
 * for the tokens "14" "/" "03"). GYRE_ERROR if there was no gyre_tag call or i is out of range. */
gyre_status gyre_tag_token_bytes(const gyre_context* context, size_t i, size_t* byte_begin,
                                 size_t* byte_end) GYRE_NOEXCEPT;
gyre_status gyre_tag_span_bytes(const gyre_context* context, size_t i, size_t* byte_begin,
                                size_t* byte_end) GYRE_NOEXCEPT;

/* Batched calls: n texts (texts[i], lengths[i] bytes; a text may be empty, with texts[i] NULL
 * when lengths[i] is 0) go through the model together. Text i's results equal what gyre_classify
 * / gyre_tag give for it, within 1e-5 (the same tokens, tags, spans and byte offsets; the
 * context's calibration setting applies). On larger batches this is faster per text than n single
 * calls: the weights are read once per time step for the whole batch. Read the results with the
 * accessors below; they stay valid until the next batched call of either kind on the context.
 * Once the context has seen its largest batch these calls allocate nothing more themselves (the
 * tokenizer may). On failure the message names the text ("text 3: invalid UTF-8 at byte 2 ..."). */
gyre_status gyre_classify_batch(gyre_context* context, const char* const* texts, const size_t* lengths,
                                size_t n) GYRE_NOEXCEPT;
/* Text i of the last gyre_classify_batch: probabilities[0..count) in label order, best = arg-max
 * label. GYRE_ERROR if there was no such call or i >= n. */
gyre_status gyre_classify_batch_result(const gyre_context* context, size_t i, const float** probabilities,
                                       size_t* count, size_t* best) GYRE_NOEXCEPT;
gyre_status gyre_tag_batch(gyre_context* context, const char* const* texts, const size_t* lengths,
                           size_t n) GYRE_NOEXCEPT;
/* Text `text` of the last gyre_tag_batch: its numbers of tokens and spans (GYRE_ERROR if there was
 * no such call or text >= n); then its token i, span i and their bytes in that text, as
 * gyre_tag_token, gyre_tag_span, gyre_tag_token_bytes and gyre_tag_span_bytes give them for one. */
gyre_status gyre_tag_batch_counts(const gyre_context* context, size_t text, size_t* token_count,
                                  size_t* span_count) GYRE_NOEXCEPT;
const char* gyre_tag_batch_token(const gyre_context* context, size_t text, size_t i,
                                 size_t* label) GYRE_NOEXCEPT;
const char* gyre_tag_batch_span(const gyre_context* context, size_t text, size_t i, size_t* begin,
                                size_t* end) GYRE_NOEXCEPT;
gyre_status gyre_tag_batch_token_bytes(const gyre_context* context, size_t text, size_t i, size_t* byte_begin,
                                       size_t* byte_end) GYRE_NOEXCEPT;
gyre_status gyre_tag_batch_span_bytes(const gyre_context* context, size_t text, size_t i, size_t* byte_begin,
                                      size_t* byte_end) GYRE_NOEXCEPT;

/* Step-wise (unidirectional models): reset, then push tokens (not text) one at a time; the
 * returned distribution has gyre_model_label_count() entries. */
gyre_status gyre_stream_reset(gyre_context* context) GYRE_NOEXCEPT;
gyre_status gyre_stream_push(gyre_context* context, const char* token, size_t length,
                             const float** distribution) GYRE_NOEXCEPT;

/* Why this label (classifiers): occlusion attribution. For each token of text, scores[i] =
 * p(label | text) - p(label | text with token i replaced by the padding id, whose embedding is
 * zero); count = number of tokens. Probabilities are calibrated as the context's setting says.
 * Runs count + 1 forward passes. scores stay valid until the next call on the context. */
gyre_status gyre_explain(gyre_context* context, const char* text, size_t length, size_t label,
                         const float** scores, size_t* count) GYRE_NOEXCEPT;
/* Token i (NUL-terminated, normalised) of the last call on text (classify, tag or explain); NULL
 * if out of range. */
const char* gyre_token(const gyre_context* context, size_t i) GYRE_NOEXCEPT;

#ifdef __cplusplus
}
#endif

#endif /* GYRE_RUNTIME_H */
