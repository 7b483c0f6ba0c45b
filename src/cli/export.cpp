// gyre export: write the compact model file for the embedded runtime, then check what the
// chosen precision costs on the dev set.

#include <cstdio>
#include <filesystem>
#include <memory>

#include <nlohmann/json.hpp>

#include "cli/command.hpp"
#include "cli/model_data.hpp"
#include "cli/options.hpp"
#include "gyre/core/error.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model_file.hpp"
#include "gyre/train/evaluate.hpp"

namespace gyre::cli {
namespace {

using nlohmann::json;

struct ExportOptions {
  std::string model;
  std::string out;
  std::string precision = "int8";
  std::string dev;
  bool no_check = false;
};

ExitCode run_export(const ExportOptions& o) {
  const runtime::DType dtype = o.precision == "f32"   ? runtime::DType::kF32
                               : o.precision == "f16" ? runtime::DType::kF16
                                                      : runtime::DType::kI8;
  const io::TrainedModel source = io::load_trained_model(o.model);
  json extra = json::object();
  extra["exported_from"] = source.path.string();
  extra["precision"] = o.precision;
  const std::size_t bytes = io::export_model(source, o.out, dtype, extra);
  // Every weight in f32: the network's parameters and the n-gram part's W and b (its keys are bytes
  // in every precision).
  const auto f32_bytes = static_cast<double>(
      (source.model->params().parameter_count() +
       (source.ngram_part.features() + 1) * static_cast<std::size_t>(source.ngram_part.classes())) *
      sizeof(float));
  std::printf("wrote %s: %.1f KiB (%s; f32 weights would be %.1f KiB, %.0f%%)\n", o.out.c_str(),
              static_cast<double>(bytes) / 1024.0, o.precision.c_str(), f32_bytes / 1024.0,
              100.0 * static_cast<double>(bytes) / f32_bytes);
  if (!source.ngram_part.empty()) {
    std::uint64_t part = 0;
    const auto file = runtime::ModelFile::open(o.out);
    for (const char* name : {"ngram.keys", "ngram.w", "ngram.b"}) {
      const runtime::TensorInfo& t = file.tensor(name);
      part += t.bytes + (t.dtype == runtime::DType::kI8 ? 4 * t.rows : 0);
    }
    std::printf("n-gram part: order %d, %zu keys, mix %g: %.1f KiB, %.1f%% of the file\n",
                source.ngram_part.order(), source.ngram_part.features(),
                static_cast<double>(source.ngram_part.mix()), static_cast<double>(part) / 1024.0,
                100.0 * static_cast<double>(part) / static_cast<double>(bytes));
  }

  std::string dev = o.dev;
  if (dev.empty() && source.header.contains("config")) dev = source.header["config"].value("dev", "");
  if (o.no_check) return ExitCode::kOk;
  std::error_code ec;
  if (dev.empty() || !std::filesystem::exists(dev, ec)) {
    std::printf("dev check skipped: give --dev FILE to measure the %s model against the original\n",
                o.precision.c_str());
    return ExitCode::kOk;
  }
  // The exported file is scored by the embedded runtime, so the printed f16/int8 numbers are what
  // an application gets; the original is the checkpoint in the training library.
  const io::TrainedModel exported = io::load_trained_model(o.out, io::Engine::kRuntimeForExported);
  // A model with an n-gram part: the encoder keeps each example's words (EncodedExample::words),
  // which the runtime's part reads, and its part scores, which the library adds.
  const LabelledData data = load_labelled(dev, source, model_read_options(source, nlohmann::json::object()));
  const auto before = train::evaluate(*source.model, data.encoded, true);
  const auto after = train::evaluate(*exported.runtime, data.encoded, true);
  const char* metric = source.spec.task == data::Task::kTag ? "span_f1" : "accuracy";
  std::size_t agree = 0, total = 0;
  for (std::size_t i = 0; i < data.encoded.size(); ++i) {
    if (source.spec.task == data::Task::kTag) {
      for (std::size_t t = 0; t < before.predictions[i].tags.size(); ++t, ++total)
        agree += before.predictions[i].tags[t] == after.predictions[i].tags[t];
    } else {
      ++total;
      agree += before.predictions[i].labels == after.predictions[i].labels;
    }
  }
  std::printf("dev %s (%s, %zu examples): original %.4f, %s %.4f (%+.2f points); label agreement %.2f%%\n",
              metric, dev.c_str(), data.encoded.size(), before.metric(metric), o.precision.c_str(),
              after.metric(metric), 100.0 * (after.metric(metric) - before.metric(metric)),
              100.0 * static_cast<double>(agree) / static_cast<double>(std::max<std::size_t>(total, 1)));
  return ExitCode::kOk;
}

const RegisterCommand kRegister{
    "export", "Write the compact model file for the embedded runtime (f32, f16 or int8)", 50,
    [](CLI::App& sub) -> Runner {
      auto o = std::make_shared<ExportOptions>();
      sub.footer(
          "Examples:\n"
          "  gyre export runs/intents-lstm --out intents.gyre --precision int8\n"
          "  gyre export runs/slots-crf --out slots.gyre --precision f16 --dev corpora/demo/slots.dev.tsv\n"
          "int8 stores matrices with one scale per row (symmetric); biases stay f32. After writing, the\n"
          "file is read back and scored on the dev set next to the original weights.");
      sub.add_option("model", o->model, "run directory or checkpoint")->required();
      sub.add_option("--out", o->out, "model file to write")->required();
      sub.add_option("--precision", o->precision, "f32 | f16 | int8")
          ->check(one_of({"f32", "f16", "int8"}))
          ->default_str("int8");
      sub.add_option("--dev", o->dev, "labelled file for the precision check (default: the run's dev file)");
      sub.add_flag("--no-check", o->no_check, "skip the dev-set check");
      return [o] { return run_export(*o); };
    }};

}  // namespace
}  // namespace gyre::cli
