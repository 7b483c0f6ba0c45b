// The C interface (include/gyre_runtime.h) over Model and Context. No exception crosses it: every
// function is noexcept and catches everything the C++ runtime may throw (guarded below).

#include "gyre_runtime.h"

#include <cstdio>
#include <cstring>
#include <exception>
#include <new>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/runtime/model.hpp"

struct gyre_model {
  gyre::runtime::Model model;
};

struct gyre_context {
  gyre::runtime::Context context;
  const gyre::runtime::TagResult* last_tag = nullptr;
  const gyre::runtime::ClassifyResult* last_classify = nullptr;
  // Batched calls: the texts as views (kept, so a repeated batch allocates nothing) and the
  // results of the last successful call.
  std::vector<std::string_view> views = {};
  gyre::Span<const gyre::runtime::ClassifyResult> classify_batch = {};
  gyre::Span<const gyre::runtime::TagResult> tag_batch = {};
};

namespace {

// Per-thread message of the last failure. A fixed array, so reporting an error never allocates
// (the error may be that memory ran out) and never throws.
thread_local char g_last_error[GYRE_ERROR_MESSAGE_MAX] = "";

void set_error(const char* message) noexcept {
  std::size_t n = std::strlen(message);
  if (n >= sizeof g_last_error) {
    n = sizeof g_last_error - 1;
    // Cut before a UTF-8 continuation byte run so the message stays well-formed (RFC 3629: 10xxxxxx).
    while (n > 0 && (static_cast<unsigned char>(message[n]) & 0xC0U) == 0x80U) --n;
  }
  std::memcpy(g_last_error, message, n);
  g_last_error[n] = '\0';
}

// Every entry point that calls into the C++ runtime goes through here: nothing propagates out of
// an extern "C" function (each is also noexcept, so an escape would be std::terminate, not UB).
template <class F>
gyre_status guarded(F&& f) noexcept {
  try {
    f();
    return GYRE_OK;
  } catch (const std::bad_alloc&) {
    set_error("out of memory");
    return GYRE_OUT_OF_MEMORY;
  } catch (const std::exception& e) {
    set_error(e.what());
    return GYRE_ERROR;
  } catch (...) {
    set_error("unknown error (not a std::exception)");
    return GYRE_ERROR;
  }
}

gyre_status null_argument(const char* what) noexcept {
  std::snprintf(g_last_error, sizeof g_last_error, "%s must not be NULL", what);
  return GYRE_ERROR;
}

// An index past the last gyre_tag call's tokens or spans (or no call yet); formatted into the
// fixed buffer, so it does not allocate either.
gyre_status out_of_range(const char* function, const char* what, std::size_t i,
                         const char* call = "gyre_tag") noexcept {
  std::snprintf(g_last_error, sizeof g_last_error, "%s: no %s %zu in the last %s call", function, what, i,
                call);
  return GYRE_ERROR;
}

gyre_status no_batch_text(const char* function, const char* call, std::size_t text) noexcept {
  std::snprintf(g_last_error, sizeof g_last_error, "%s: no text %zu in the last %s call", function, text,
                call);
  return GYRE_ERROR;
}

gyre_status no_batch_item(const char* function, const char* what, std::size_t i, std::size_t text) noexcept {
  std::snprintf(g_last_error, sizeof g_last_error,
                "%s: no %s %zu in text %zu of the last gyre_tag_batch call", function, what, i, text);
  return GYRE_ERROR;
}

/// The texts of a batched call as views in context->views; false (message set) on NULL misuse.
bool batch_views(gyre_context* context, const char* const* texts, const size_t* lengths, size_t n) noexcept {
  if (n > 0 && (!texts || !lengths)) {
    null_argument("texts and lengths (with n > 0)");
    return false;
  }
  for (size_t i = 0; i < n; ++i)
    if (!texts[i] && lengths[i] > 0) {
      std::snprintf(g_last_error, sizeof g_last_error, "text %zu: NULL with length %zu", i, lengths[i]);
      return false;
    }
  return guarded([&] {
           context->views.resize(n);
           for (size_t i = 0; i < n; ++i)
             context->views[i] = std::string_view(texts[i] ? texts[i] : "", lengths[i]);
         }) == GYRE_OK;
}

}  // namespace

extern "C" {

const char* gyre_last_error(void) noexcept {
  return g_last_error;
}

gyre_status gyre_model_load(const char* path, gyre_model** out) noexcept {
  if (!path || !out) return null_argument("path and out");
  *out = nullptr;
  return guarded([&] { *out = new gyre_model{gyre::runtime::Model::load(path)}; });
}

gyre_status gyre_model_load_buffer(const void* data, size_t size, gyre_model** out) noexcept {
  if (!data || !out) return null_argument("data and out");
  *out = nullptr;
  return guarded([&] { *out = new gyre_model{gyre::runtime::Model::from_buffer(data, size)}; });
}

void gyre_model_free(gyre_model* model) noexcept {
  delete model;
}

gyre_task gyre_model_task(const gyre_model* model) noexcept {
  if (!model) {
    null_argument("model");
    return GYRE_TASK_INVALID;
  }
  return model->model.architecture().task == gyre::runtime::Task::kTag ? GYRE_TASK_TAG : GYRE_TASK_CLASSIFY;
}

size_t gyre_model_label_count(const gyre_model* model) noexcept {
  if (!model) {
    null_argument("model");
    return 0;
  }
  return model->model.labels().size();
}

const char* gyre_model_label(const gyre_model* model, size_t index) noexcept {
  if (!model) {
    null_argument("model");
    return nullptr;
  }
  const auto& labels = model->model.labels();
  return index < labels.size() ? labels[index].c_str() : nullptr;
}

gyre_status gyre_context_new(const gyre_model* model, gyre_context** out) noexcept {
  if (!model || !out) return null_argument("model and out");
  *out = nullptr;
  return guarded([&] { *out = new gyre_context{gyre::runtime::Context(model->model)}; });
}

size_t gyre_model_temperature_count(const gyre_model* model) noexcept {
  return model ? model->model.architecture().temperature.size() : 0;
}

float gyre_model_temperature(const gyre_model* model, size_t index) noexcept {
  if (!model || index >= model->model.architecture().temperature.size()) return 0.0f;
  return model->model.architecture().temperature[index];
}

float gyre_model_label_threshold(const gyre_model* model, size_t index) noexcept {
  if (!model) return 0.0f;
  const auto& a = model->model.architecture();
  if (a.output != gyre::runtime::Output::kSigmoid || index >= model->model.labels().size()) return 0.0f;
  return a.threshold_of(index);
}

int gyre_model_has_ngram_part(const gyre_model* model) noexcept {
  return model && model->model.architecture().has_ngram_part() ? 1 : 0;
}

gyre_status gyre_context_set_calibrated(gyre_context* context, int on) noexcept {
  if (!context) return null_argument("context");
  return guarded([&] { context->context.set_calibrated(on != 0); });
}

void gyre_context_free(gyre_context* context) noexcept {
  delete context;
}

gyre_status gyre_classify(gyre_context* context, const char* text, size_t length, const float** probabilities,
                          size_t* count, size_t* best) noexcept {
  if (!context || (!text && length) || !probabilities || !count || !best)
    return null_argument("context, text, probabilities, count and best");
  context->last_classify = nullptr;
  return guarded([&] {
    const auto& r = context->context.classify(std::string_view(text ? text : "", length));
    context->last_classify = &r;
    *probabilities = r.probabilities.data();
    *count = r.probabilities.size();
    *best = r.best;
  });
}

size_t gyre_classify_chosen_count(const gyre_context* context) noexcept {
  return context && context->last_classify ? context->last_classify->chosen.size() : 0;
}

gyre_status gyre_classify_chosen(const gyre_context* context, size_t i, size_t* label) noexcept {
  if (!context || !label) return null_argument("context and label");
  if (!context->last_classify || i >= context->last_classify->chosen.size())
    return out_of_range("gyre_classify_chosen", "chosen label", i, "gyre_classify");
  *label = context->last_classify->chosen[i];
  return GYRE_OK;
}

gyre_status gyre_tag(gyre_context* context, const char* text, size_t length, size_t* token_count,
                     size_t* span_count) noexcept {
  if (!context || (!text && length) || !token_count || !span_count)
    return null_argument("context, text, token_count and span_count");
  context->last_tag = nullptr;
  return guarded([&] {
    const auto& r = context->context.tag(std::string_view(text ? text : "", length));
    context->last_tag = &r;
    *token_count = r.tags.size();
    *span_count = r.spans.size();
  });
}

const char* gyre_tag_token(const gyre_context* context, size_t i, size_t* label) noexcept {
  if (!context || !context->last_tag || i >= context->last_tag->tokens.size()) return nullptr;
  if (label) *label = context->last_tag->tags[i];
  return context->last_tag->tokens[i].c_str();
}

const char* gyre_tag_span(const gyre_context* context, size_t i, size_t* begin, size_t* end) noexcept {
  if (!context || !context->last_tag || i >= context->last_tag->spans.size()) return nullptr;
  const auto& s = context->last_tag->spans[i];
  if (begin) *begin = s.begin;
  if (end) *end = s.end;
  return s.type.data();  // views a std::string held by the model: NUL-terminated
}

gyre_status gyre_tag_token_bytes(const gyre_context* context, size_t i, size_t* byte_begin,
                                 size_t* byte_end) noexcept {
  if (!context || !byte_begin || !byte_end) return null_argument("context, byte_begin and byte_end");
  if (!context->last_tag || i >= context->last_tag->token_bytes.size())
    return out_of_range("gyre_tag_token_bytes", "token", i);
  *byte_begin = context->last_tag->token_bytes[i].begin;
  *byte_end = context->last_tag->token_bytes[i].end;
  return GYRE_OK;
}

gyre_status gyre_tag_span_bytes(const gyre_context* context, size_t i, size_t* byte_begin,
                                size_t* byte_end) noexcept {
  if (!context || !byte_begin || !byte_end) return null_argument("context, byte_begin and byte_end");
  if (!context->last_tag || i >= context->last_tag->spans.size())
    return out_of_range("gyre_tag_span_bytes", "span", i);
  *byte_begin = context->last_tag->spans[i].byte_begin;
  *byte_end = context->last_tag->spans[i].byte_end;
  return GYRE_OK;
}

gyre_status gyre_classify_batch(gyre_context* context, const char* const* texts, const size_t* lengths,
                                size_t n) noexcept {
  if (!context) return null_argument("context");
  context->classify_batch = {};  // either call may reuse the other's buffers
  context->tag_batch = {};
  context->last_classify = nullptr;  // and those of gyre_classify
  if (!batch_views(context, texts, lengths, n)) return GYRE_ERROR;
  return guarded([&] { context->classify_batch = context->context.classify_batch(context->views); });
}

gyre_status gyre_classify_batch_result(const gyre_context* context, size_t i, const float** probabilities,
                                       size_t* count, size_t* best) noexcept {
  if (!context || !probabilities || !count || !best)
    return null_argument("context, probabilities, count and best");
  if (i >= context->classify_batch.size())
    return no_batch_text("gyre_classify_batch_result", "gyre_classify_batch", i);
  const auto& r = context->classify_batch[i];
  *probabilities = r.probabilities.data();
  *count = r.probabilities.size();
  *best = r.best;
  return GYRE_OK;
}

gyre_status gyre_tag_batch(gyre_context* context, const char* const* texts, const size_t* lengths,
                           size_t n) noexcept {
  if (!context) return null_argument("context");
  context->classify_batch = {};  // either call may reuse the other's buffers
  context->tag_batch = {};
  context->last_classify = nullptr;  // and those of gyre_classify
  if (!batch_views(context, texts, lengths, n)) return GYRE_ERROR;
  return guarded([&] { context->tag_batch = context->context.tag_batch(context->views); });
}

gyre_status gyre_tag_batch_counts(const gyre_context* context, size_t text, size_t* token_count,
                                  size_t* span_count) noexcept {
  if (!context || !token_count || !span_count) return null_argument("context, token_count and span_count");
  if (text >= context->tag_batch.size())
    return no_batch_text("gyre_tag_batch_counts", "gyre_tag_batch", text);
  *token_count = context->tag_batch[text].tags.size();
  *span_count = context->tag_batch[text].spans.size();
  return GYRE_OK;
}

const char* gyre_tag_batch_token(const gyre_context* context, size_t text, size_t i, size_t* label) noexcept {
  if (!context || text >= context->tag_batch.size() || i >= context->tag_batch[text].tokens.size())
    return nullptr;
  if (label) *label = context->tag_batch[text].tags[i];
  return context->tag_batch[text].tokens[i].c_str();
}

const char* gyre_tag_batch_span(const gyre_context* context, size_t text, size_t i, size_t* begin,
                                size_t* end) noexcept {
  if (!context || text >= context->tag_batch.size() || i >= context->tag_batch[text].spans.size())
    return nullptr;
  const auto& s = context->tag_batch[text].spans[i];
  if (begin) *begin = s.begin;
  if (end) *end = s.end;
  return s.type.data();  // views a std::string held by the model: NUL-terminated
}

gyre_status gyre_tag_batch_token_bytes(const gyre_context* context, size_t text, size_t i, size_t* byte_begin,
                                       size_t* byte_end) noexcept {
  if (!context || !byte_begin || !byte_end) return null_argument("context, byte_begin and byte_end");
  if (text >= context->tag_batch.size())
    return no_batch_text("gyre_tag_batch_token_bytes", "gyre_tag_batch", text);
  const auto& r = context->tag_batch[text];
  if (i >= r.token_bytes.size()) return no_batch_item("gyre_tag_batch_token_bytes", "token", i, text);
  *byte_begin = r.token_bytes[i].begin;
  *byte_end = r.token_bytes[i].end;
  return GYRE_OK;
}

gyre_status gyre_tag_batch_span_bytes(const gyre_context* context, size_t text, size_t i, size_t* byte_begin,
                                      size_t* byte_end) noexcept {
  if (!context || !byte_begin || !byte_end) return null_argument("context, byte_begin and byte_end");
  if (text >= context->tag_batch.size())
    return no_batch_text("gyre_tag_batch_span_bytes", "gyre_tag_batch", text);
  const auto& r = context->tag_batch[text];
  if (i >= r.spans.size()) return no_batch_item("gyre_tag_batch_span_bytes", "span", i, text);
  *byte_begin = r.spans[i].byte_begin;
  *byte_end = r.spans[i].byte_end;
  return GYRE_OK;
}

gyre_status gyre_stream_reset(gyre_context* context) noexcept {
  if (!context) return null_argument("context");
  return guarded([&] { context->context.reset(); });
}

gyre_status gyre_stream_push(gyre_context* context, const char* token, size_t length,
                             const float** distribution) noexcept {
  if (!context || (!token && length) || !distribution)
    return null_argument("context, token and distribution");
  return guarded(
      [&] { *distribution = context->context.push(std::string_view(token ? token : "", length)).data(); });
}

gyre_status gyre_explain(gyre_context* context, const char* text, size_t length, size_t label,
                         const float** scores, size_t* count) noexcept {
  if (!context || (!text && length) || !scores || !count)
    return null_argument("context, text, scores and count");
  context->last_tag = nullptr;
  return guarded([&] {
    const std::size_t labels = context->context.model().labels().size();
    if (label >= labels)
      throw gyre::runtime::Error("label " + std::to_string(label) + " is outside the model's " +
                                 std::to_string(labels) + " labels");
    const auto s = context->context.occlusion(std::string_view(text ? text : "", length),
                                              static_cast<std::uint32_t>(label));
    *scores = s.data();
    *count = s.size();
  });
}

const char* gyre_token(const gyre_context* context, size_t i) noexcept {
  if (!context || i >= context->context.tokens().size()) return nullptr;
  return context->context.tokens()[i].c_str();
}

}  // extern "C"
