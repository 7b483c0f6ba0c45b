// gyre inspect MODEL: what a model file (or checkpoint) holds: format, checksum, architecture,
// tokenizer settings, labels and every tensor with its dtype, shape and size.

#include <cstdio>
#include <iostream>
#include <memory>
#include <optional>
#include <string>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/runtime/model_file.hpp"

namespace gyre::cli {
namespace {

struct InspectOptions {
  std::string model;
  bool no_tensors = false;
  bool header = false;
};

std::string on_off(bool b) { return b ? "on" : "off"; }

ExitCode run_inspect(const InspectOptions& o) {
  std::optional<runtime::ModelFile> file;
  try {
    file = runtime::ModelFile::open(o.model, /*verify_checksum=*/false);
  } catch (const runtime::Error& e) {
    throw FormatError(o.model, e.what());
  }
  char crc[96];
  if (file->checksum_ok()) {
    std::snprintf(crc, sizeof crc, "CRC-32C %08x ok", file->checksum());
  } else {
    std::snprintf(crc, sizeof crc, "CRC-32C MISMATCH (stored %08x, computed %08x): file is corrupt", file->checksum(),
                  file->computed_checksum());
  }
  std::cout << "file         " << o.model << " (" << file->file_size() << " bytes)\n"
            << "format       gyre model file, version " << file->format_version() << '\n'
            << "checksum     " << crc << '\n';
  std::optional<runtime::Model> model;
  std::string not_model;
  if (file->checksum_ok()) {
    try {
      model = runtime::Model::from_file(*file);
    } catch (const runtime::Error& e) {
      not_model = e.what();
    }
  }
  if (model) {
    const auto& a = model->architecture();
    std::cout << "task         " << runtime::to_string(a.task) << '\n'
              << "network      " << runtime::to_string(a.cell) << ", " << a.layers << (a.layers == 1 ? " layer" : " layers")
              << ", " << (a.bidirectional ? "bidirectional" : "unidirectional") << ", embedding " << a.embedding_size
              << ", hidden " << a.hidden_size << '\n';
    std::cout << "output       " << runtime::to_string(a.output);
    if (a.task == runtime::Task::kClassify) std::cout << ", pooling " << runtime::to_string(a.pooling);
    if (a.output == runtime::Output::kSigmoid) std::cout << ", multi-label threshold " << a.multi_label_threshold;
    if (a.task == runtime::Task::kTag) std::cout << ", tag scheme " << runtime::to_string(a.tag_scheme);
    std::cout << '\n';
    const auto& t = model->tokenizer_settings();
    std::cout << "tokenizer    mode " << runtime::to_string(t.mode) << ", nfkc " << on_off(t.nfkc) << ", case_fold "
              << on_off(t.case_fold) << ", fold_digits " << on_off(t.fold_digits) << ", keep_punctuation "
              << on_off(t.keep_punctuation) << ", max_tokens " << t.max_tokens << (t.max_tokens ? "" : " (no limit)")
              << '\n';
    std::cout << "vocabulary   " << model->vocabulary_size() << " tokens\n";
    std::cout << "labels       " << model->labels().size() << ':';
    for (const auto& l : model->labels()) std::cout << ' ' << l;
    std::cout << '\n';
    std::cout << "cost         " << model->flops(20) / 1e6 << " MFLOP per 20-token text\n";
  } else if (!not_model.empty()) {
    std::cout << "contents     not an exported model (" << not_model << ")\n";
  }
  std::cout << "header       " << file->header_json().size() << " bytes of JSON\n";
  if (o.header) std::cout << file->header_json() << '\n';
  std::uint64_t total = 0;
  std::size_t width = 4;
  for (const auto& t : file->tensors()) width = std::max(width, t.name.size());
  if (!o.no_tensors) {
    std::cout << "tensors      " << file->tensors().size() << '\n';
    std::printf("  %-*s  %-5s %-16s %12s\n", static_cast<int>(width), "name", "dtype", "shape", "bytes");
  }
  for (const auto& t : file->tensors()) {
    const std::uint64_t bytes = t.bytes + (t.dtype == runtime::DType::kI8 ? 4 * t.rows : 0);
    total += bytes;
    if (!o.no_tensors)
      std::printf("  %-*s  %-5s %-16s %12llu\n", static_cast<int>(width), t.name.c_str(), runtime::to_string(t.dtype),
                  t.shape_string().c_str(), static_cast<unsigned long long>(bytes));
  }
  std::cout << "tensor bytes " << total << " (i8 scales included)\n";
  std::cout.flush();
  return file->checksum_ok() ? ExitCode::kOk : ExitCode::kBadInput;
}

const RegisterCommand registration{
    "inspect", "Show a model file's header, tensors, labels, tokenizer settings and checksum status", 80,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<InspectOptions>();
      sub.add_option("model", o->model, "Model file (.gyre) or checkpoint")->required()->check(CLI::ExistingFile);
      sub.add_flag("--no-tensors", o->no_tensors, "Omit the per-tensor table");
      sub.add_flag("--header", o->header, "Also print the raw JSON header");
      sub.footer("Example:\n  gyre inspect runs/intents/model.gyre\n"
                 "Exit code 2 when the file is corrupt (checksum mismatch) or not a gyre file.");
      return [o] { return run_inspect(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
