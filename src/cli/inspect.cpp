// gyre inspect MODEL: what a model file (or checkpoint) holds: format, checksum, architecture,
// tokenizer settings, labels and every tensor with its dtype, shape and size. MODEL may be a run
// directory (its selected.bin), as for every command that reads a model.

#include <cstdio>
#include <iostream>
#include <memory>
#include <optional>
#include <string>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "gyre/core/error.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/runtime/model_file.hpp"
#include "gyre/runtime/model_header.hpp"

namespace gyre::cli {
namespace {

struct InspectOptions {
  std::string model;
  bool no_tensors = false;
  bool header = false;
};

std::string on_off(bool b) {
  return b ? "on" : "off";
}

// The header JSON indented for reading; as stored when it is not valid JSON (a damaged file).
std::string readable_header(std::string_view text) {
  const auto j = nlohmann::json::parse(text.begin(), text.end(), nullptr, /*allow_exceptions=*/false);
  return j.is_discarded() ? std::string(text) : j.dump(2);
}

// The model description (architecture, calibration, tokenizer, vocabulary, labels) and, for an
// exported model, its cost in the runtime.
void print_description(const runtime::ModelHeader& header, const runtime::ModelFile& file) {
  const auto& a = header.architecture;
  std::cout << "contents     " << (header.format == "gyre-model" ? "exported model" : "training checkpoint")
            << '\n'
            << "task         " << runtime::to_string(a.task) << '\n'
            << "network      " << runtime::to_string(a.cell) << ", " << a.layers
            << (a.layers == 1 ? " layer" : " layers") << ", "
            << (a.bidirectional ? "bidirectional" : "unidirectional") << ", embedding " << a.embedding_size
            << ", hidden " << a.hidden_size << '\n';
  std::cout << "output       " << runtime::to_string(a.output);
  if (a.task == runtime::Task::kClassify) std::cout << ", pooling " << runtime::to_string(a.pooling);
  if (a.output == runtime::Output::kSigmoid)
    std::cout << ", multi-label threshold " << a.multi_label_threshold;
  if (a.task == runtime::Task::kTag) std::cout << ", tag scheme " << runtime::to_string(a.tag_scheme);
  std::cout << '\n';
  if (!a.label_thresholds.empty()) {
    std::cout << "thresholds   per label (tuned on dev):";
    for (std::size_t i = 0; i < a.label_thresholds.size() && i < header.labels.size(); ++i)
      std::cout << (i ? ", " : " ") << header.labels[i] << ' ' << a.label_thresholds[i];
    std::cout << '\n';
  }
  std::cout << "calibration  ";
  if (a.temperature.empty()) std::cout << "none (raw probabilities)";
  for (std::size_t i = 0; i < a.temperature.size(); ++i)
    std::cout << (i ? " " : "temperature ") << a.temperature[i];
  std::cout << '\n';
  if (a.has_ngram_part()) {
    // What the part takes in the file: its key list, weights (with i8 scales) and biases.
    std::uint64_t bytes = 0;
    for (const char* name : {"ngram.keys", "ngram.w", "ngram.b"}) {
      const runtime::TensorInfo& t = file.tensor(name);
      bytes += t.bytes + (t.dtype == runtime::DType::kI8 ? 4 * t.rows : 0);
    }
    std::printf("n-gram part  order %d, %zu keys, mix %g, weights %s; %.1f KiB (%.1f%% of the file)\n",
                a.ngram_order, a.ngram_keys, static_cast<double>(a.ngram_mix),
                runtime::to_string(file.tensor("ngram.w").dtype), static_cast<double>(bytes) / 1024.0,
                100.0 * static_cast<double>(bytes) / static_cast<double>(file.file_size()));
    std::fflush(stdout);
  } else if (a.task == runtime::Task::kClassify) {
    std::cout << "n-gram part  none\n";
  }
  const auto& t = header.tokenizer;
  std::cout << "tokenizer    mode " << runtime::to_string(t.mode) << ", nfkc " << on_off(t.nfkc)
            << ", case_fold " << on_off(t.case_fold) << ", fold_digits " << on_off(t.fold_digits)
            << ", keep_punctuation " << on_off(t.keep_punctuation) << ", max_tokens " << t.max_tokens
            << (t.max_tokens ? "" : " (no limit)") << '\n';
  std::cout << "vocabulary   " << header.vocabulary.size() << " tokens\n";
  std::cout << "labels       " << header.labels.size() << ':';
  for (const auto& l : header.labels) std::cout << ' ' << l;
  std::cout << '\n';
  if (header.format == "gyre-model") {
    try {
      const runtime::Model model = runtime::Model::from_file(file);
      std::cout << "cost         " << model.flops(20) / 1e6 << " MFLOP per 20-token text\n";
    } catch (const runtime::Error& e) {
      std::cout << "runtime      cannot load it: " << e.what() << '\n';
    }
  }
}

// The tensor table (unless --no-tensors) and the total bytes of tensor data.
void print_tensors(const runtime::ModelFile& file, bool list) {
  std::uint64_t total = 0;
  std::size_t width = 4;
  for (const auto& t : file.tensors()) width = std::max(width, t.name.size());
  if (list) {
    std::cout << "tensors      " << file.tensors().size() << '\n';
    std::printf("  %-*s  %-5s %-16s %12s\n", static_cast<int>(width), "name", "dtype", "shape", "bytes");
  }
  for (const auto& t : file.tensors()) {
    const std::uint64_t bytes = t.bytes + (t.dtype == runtime::DType::kI8 ? 4 * t.rows : 0);
    total += bytes;
    if (list)
      std::printf("  %-*s  %-5s %-16s %12llu\n", static_cast<int>(width), t.name.c_str(),
                  runtime::to_string(t.dtype), t.shape_string().c_str(),
                  static_cast<unsigned long long>(bytes));
  }
  std::cout << "tensor bytes " << total << " (i8 scales included)\n";
}

ExitCode run_inspect(const InspectOptions& o) {
  const std::string path = io::resolve_model_path(o.model).string();
  std::optional<runtime::ModelFile> file;
  try {
    file = runtime::ModelFile::open(path, /*verify_checksum=*/false);
  } catch (const runtime::Error& e) {
    throw FormatError(path, e.what());
  }
  char crc[96];
  if (file->checksum_ok()) {
    std::snprintf(crc, sizeof crc, "CRC-32C %08x ok", file->checksum());
  } else {
    std::snprintf(crc, sizeof crc, "CRC-32C MISMATCH (stored %08x, computed %08x): file is corrupt",
                  file->checksum(), file->computed_checksum());
  }
  std::cout << "file         " << path << " (" << file->file_size() << " bytes)\n"
            << "format       gyre model file, version " << file->format_version() << '\n'
            << "checksum     " << crc << '\n';
  // The model description through the one reader; a checkpoint has one too.
  std::optional<runtime::ModelHeader> header;
  std::string not_model;
  if (file->checksum_ok()) {
    try {
      header = runtime::parse_model_header(file->header_json(), file->name());
      runtime::check_model_tensors(*header, *file);
    } catch (const runtime::Error& e) {
      header.reset();
      not_model = e.what();
    }
  }
  if (header)
    print_description(*header, *file);
  else if (!not_model.empty())
    std::cout << "contents     not a gyre model or checkpoint (" << not_model << ")\n";
  std::cout << "header       " << file->header_json().size() << " bytes of JSON\n";
  if (o.header) std::cout << readable_header(file->header_json()) << '\n';
  print_tensors(*file, !o.no_tensors);
  std::cout.flush();
  return file->checksum_ok() ? ExitCode::kOk : ExitCode::kBadInput;
}

const RegisterCommand registration{
    "inspect", "Show a model file's header, tensors, labels, tokenizer settings and checksum status", 80,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<InspectOptions>();
      sub.add_option("model", o->model, "run directory, checkpoint or exported model")->required();
      sub.add_flag("--no-tensors", o->no_tensors, "omit the per-tensor table");
      sub.add_flag("--header", o->header, "also print the JSON header (indented)");
      sub.footer(
          "Examples:\n  gyre inspect intents.gyre            # a file written by gyre export\n"
          "  gyre inspect runs/intents-lstm      # a run directory: its selected.bin\n"
          "Exit code 2 when the file is corrupt (checksum mismatch) or not a gyre file.");
      return [o] { return run_inspect(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
