// The C interface (include/gyre_runtime.h) over Model and Context. No exception crosses it.

#include "gyre_runtime.h"

#include <new>
#include <string>

#include "gyre/runtime/model.hpp"

struct gyre_model {
  gyre::runtime::Model model;
};

struct gyre_context {
  gyre::runtime::Context context;
  const gyre::runtime::TagResult* last_tag = nullptr;
};

namespace {

thread_local std::string g_last_error;

template <class F>
gyre_status guarded(F&& f) noexcept {
  try {
    f();
    return GYRE_OK;
  } catch (const std::bad_alloc&) {
    g_last_error = "out of memory";
    return GYRE_OUT_OF_MEMORY;
  } catch (const std::exception& e) {
    try {
      g_last_error = e.what();
    } catch (...) {
    }
    return GYRE_ERROR;
  } catch (...) {
    g_last_error = "unknown error";
    return GYRE_ERROR;
  }
}

gyre_status null_argument(const char* what) noexcept {
  g_last_error = std::string(what) + " must not be NULL";
  return GYRE_ERROR;
}

}  // namespace

extern "C" {

const char* gyre_last_error(void) { return g_last_error.c_str(); }

gyre_status gyre_model_load(const char* path, gyre_model** out) {
  if (!path || !out) return null_argument("path and out");
  *out = nullptr;
  return guarded([&] { *out = new gyre_model{gyre::runtime::Model::load(path)}; });
}

gyre_status gyre_model_load_buffer(const void* data, size_t size, gyre_model** out) {
  if (!data || !out) return null_argument("data and out");
  *out = nullptr;
  return guarded([&] { *out = new gyre_model{gyre::runtime::Model::from_buffer(data, size)}; });
}

void gyre_model_free(gyre_model* model) { delete model; }

gyre_task gyre_model_task(const gyre_model* model) {
  return model->model.architecture().task == gyre::runtime::Task::kTag ? GYRE_TASK_TAG : GYRE_TASK_CLASSIFY;
}

size_t gyre_model_label_count(const gyre_model* model) { return model->model.labels().size(); }

const char* gyre_model_label(const gyre_model* model, size_t index) {
  const auto& labels = model->model.labels();
  return index < labels.size() ? labels[index].c_str() : nullptr;
}

gyre_status gyre_context_new(const gyre_model* model, gyre_context** out) {
  if (!model || !out) return null_argument("model and out");
  *out = nullptr;
  return guarded([&] { *out = new gyre_context{gyre::runtime::Context(model->model)}; });
}

void gyre_context_free(gyre_context* context) { delete context; }

gyre_status gyre_classify(gyre_context* context, const char* text, size_t length, const float** probabilities,
                          size_t* count, size_t* best) {
  if (!context || (!text && length) || !probabilities || !count || !best)
    return null_argument("context, text, probabilities, count and best");
  return guarded([&] {
    const auto& r = context->context.classify(std::string_view(text ? text : "", length));
    *probabilities = r.probabilities.data();
    *count = r.probabilities.size();
    *best = r.best;
  });
}

gyre_status gyre_tag(gyre_context* context, const char* text, size_t length, size_t* token_count,
                     size_t* span_count) {
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

const char* gyre_tag_token(const gyre_context* context, size_t i, size_t* label) {
  if (!context || !context->last_tag || i >= context->last_tag->tokens.size()) return nullptr;
  if (label) *label = context->last_tag->tags[i];
  return context->last_tag->tokens[i].c_str();
}

const char* gyre_tag_span(const gyre_context* context, size_t i, size_t* begin, size_t* end) {
  if (!context || !context->last_tag || i >= context->last_tag->spans.size()) return nullptr;
  const auto& s = context->last_tag->spans[i];
  if (begin) *begin = s.begin;
  if (end) *end = s.end;
  return s.type.data();  // views a std::string held by the model: NUL-terminated
}

gyre_status gyre_stream_reset(gyre_context* context) {
  if (!context) return null_argument("context");
  return guarded([&] { context->context.reset(); });
}

gyre_status gyre_stream_push(gyre_context* context, const char* token, size_t length, const float** distribution) {
  if (!context || (!token && length) || !distribution) return null_argument("context, token and distribution");
  return guarded([&] { *distribution = context->context.push(std::string_view(token ? token : "", length)).data(); });
}

}  // extern "C"
