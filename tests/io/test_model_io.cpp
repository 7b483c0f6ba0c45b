// One reader and validator of the model description (runtime::parse_model_header) behind both the
// training library's loader and the embedded runtime: crafted headers and tensors are refused by
// both, with a FormatError (exit code 2) rather than an out-of-memory or a NaN prediction.

#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <functional>
#include <limits>
#include <string>
#include <vector>

#include <sys/wait.h>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/runtime/ngram_part_file.hpp"
#include "runtime/detail/checksum.hpp"
#include "support/random_model.hpp"

namespace fs = std::filesystem;
using Catch::Matchers::Contains;
using nlohmann::json;

namespace {

fs::path tmp_dir() {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "model_io";
  fs::create_directories(dir);
  return dir;
}

gyre::model::ModelSpec classifier_spec() {
  gyre::model::ModelSpec spec;
  spec.embedding_size = 6;
  spec.hidden_size = 5;
  spec.labels = {"book", "cancel", "praise"};
  return spec;
}

/// A small exported classifier (matrices in `precision`).
fs::path exported(gyre::runtime::DType precision, const std::string& name) {
  const auto trained = gyre::test::random_model(classifier_spec(), 7);
  const fs::path file = tmp_dir() / name;
  gyre::io::export_model(trained, file, precision);
  return file;
}

/// A copy of `src` whose header JSON went through `edit` (tensors copied unchanged).
fs::path with_header(const fs::path& src, const std::string& name, const std::function<void(json&)>& edit) {
  const auto file = gyre::runtime::ModelFile::open(src.string());
  json h = json::parse(file.header_json());
  edit(h);
  gyre::runtime::ModelFileWriter writer(h.dump());
  for (const auto& t : file.tensors()) {
    if (t.dtype == gyre::runtime::DType::kU8)
      writer.add_bytes(t.name,
                       {static_cast<const unsigned char*>(t.data), static_cast<std::size_t>(t.bytes)});
    else
      writer.add_tensor(t.name, t.shape, file.read_f32(t), t.dtype);
  }
  const fs::path out = tmp_dir() / name;
  writer.write(out.string());
  return out;
}

/// A copy of `src` with bytes changed by `edit` (given the parsed file for offsets) and the
/// CRC-32C trailer recomputed, so that only the validator can object.
fs::path with_bytes(
    const fs::path& src, const std::string& name,
    const std::function<void(std::vector<unsigned char>&, const gyre::runtime::ModelFile&)>& edit) {
  std::ifstream in(src, std::ios::binary);
  std::vector<unsigned char> bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  const auto file = gyre::runtime::ModelFile::from_bytes(bytes, "copy");
  edit(bytes, file);
  const std::uint32_t crc = gyre::runtime::detail::crc32c(bytes.data(), bytes.size() - 8);
  for (int i = 0; i < 4; ++i)
    bytes[bytes.size() - 8 + static_cast<std::size_t>(i)] = static_cast<unsigned char>(crc >> (8 * i));
  const fs::path out = tmp_dir() / name;
  std::ofstream(out, std::ios::binary)
      .write(reinterpret_cast<const char*>(bytes.data()), static_cast<std::streamsize>(bytes.size()));
  return out;
}

void put_f32(std::vector<unsigned char>& bytes, std::uint64_t offset, float v) {
  std::memcpy(bytes.data() + offset, &v, sizeof v);
}

/// Both loaders refuse the file, and the library's message contains `what`.
void refused_by_both(const fs::path& file, const std::string& what) {
  CAPTURE(file.string());
  REQUIRE_THROWS_WITH(gyre::io::load_trained_model(file), Contains(what));
  REQUIRE_THROWS_AS(gyre::io::load_trained_model(file), gyre::FormatError);
  REQUIRE_THROWS_WITH(gyre::runtime::Model::load(file.string()), Contains(what));
}

}  // namespace

TEST_CASE("header sizes are bounded: huge values are a format error, not an allocation", "[io]") {
  const fs::path good = exported(gyre::runtime::DType::kF32, "bounds.gyre");
  REQUIRE_NOTHROW(gyre::io::load_trained_model(good));
  SECTION("hidden_size 2^31-1 (issue 10 item 5: was 'out of memory', exit 1)") {
    const auto f =
        with_header(good, "hidden_max.gyre", [](json& h) { h["architecture"]["hidden_size"] = 2147483647; });
    refused_by_both(f, "\"architecture.hidden_size\" must be an integer in [1, 65536]");
  }
  SECTION("one layer more than the limit (issue 10 item 5: 1000000 layers hung predict)") {
    const auto f = with_header(good, "layers.gyre", [](json& h) { h["architecture"]["layers"] = 65; });
    refused_by_both(f, "\"architecture.layers\" must be an integer in [1, 64]");
  }
  SECTION("a size that disagrees with the tensors is refused before the model is built") {
    const auto f =
        with_header(good, "embed.gyre", [](json& h) { h["architecture"]["embedding_size"] = 60000; });
    refused_by_both(f, "has shape [23 x 6], the header needs [23 x 60000]");
  }
}

TEST_CASE("one validator: the library refuses exactly what the runtime refuses (issue 10 item 7)", "[io]") {
  const fs::path good = exported(gyre::runtime::DType::kF32, "strict.gyre");
  struct Case {
    const char* name;
    std::function<void(json&)> edit;
    const char* message;
  };
  const Case cases[] = {
      {"fractional size", [](json& h) { h["architecture"]["hidden_size"] = 5.5; }, "must be an integer"},
      {"unknown architecture key", [](json& h) { h["architecture"]["attention"] = true; },
       "unknown key \"architecture.attention\""},
      {"unknown tokenizer key", [](json& h) { h["tokenizer"]["lowercase"] = true; },
       "unknown key \"tokenizer.lowercase\""},
      {"missing tokenizer key", [](json& h) { h["tokenizer"].erase("nfkc"); }, "missing \"tokenizer.nfkc\""},
      {"missing pooling", [](json& h) { h["architecture"].erase("pooling"); },
       "missing \"architecture.pooling\""},
      {"threshold on a softmax model", [](json& h) { h["architecture"]["multi_label_threshold"] = 0.5; },
       "only for output \"sigmoid\""},
      {"label thresholds on a softmax model",
       [](json& h) {
         h["architecture"]["label_thresholds"] = json::array({0.5, 0.5, 0.5});
       },
       "\"architecture.label_thresholds\" is only for output \"sigmoid\""},
      {"missing format", [](json& h) { h.erase("format"); }, "missing \"format\""},
      {"other format", [](json& h) { h["format"] = "gyre-vocab"; }, "\"format\" is \"gyre-vocab\""},
      {"vocabulary without the reserved tokens first",
       [](json& h) { std::swap(h["vocabulary"][0], h["vocabulary"][1]); },
       "must start with \"<pad>\", \"<unk>\""},
      {"repeated token", [](json& h) { h["vocabulary"][3] = h["vocabulary"][2]; }, "appears twice"},
      {"label with a NUL", [](json& h) { h["labels"][1] = std::string("can\0cel", 7); }, "control character"},
      {"repeated label", [](json& h) { h["labels"][1] = h["labels"][0]; }, "appears twice"},
      {"temperature count",
       [](json& h) {
         h["architecture"]["temperature"] = json::array({1.5, 2.0});
       },
       "\"architecture.temperature\" has 2 values; output softmax with 3 labels needs 1"},
      {"temperature zero", [](json& h) { h["architecture"]["temperature"] = json::array({0.0}); },
       "every temperature must be a number in"},
      {"temperature not a list", [](json& h) { h["architecture"]["temperature"] = 1.5; },
       "must be a non-empty array of numbers"},
  };
  for (const auto& c : cases) {
    DYNAMIC_SECTION(c.name) {
      refused_by_both(with_header(good, "strict-case.gyre", c.edit), c.message);
    }
  }
}

TEST_CASE("a temperature in the header survives export and loading, and is applied", "[io]") {
  auto spec = classifier_spec();
  spec.temperature = {1.75f};
  const auto trained = gyre::test::random_model(spec, 11);
  const fs::path file = tmp_dir() / "tempered.gyre";
  gyre::io::export_model(trained, file, gyre::runtime::DType::kF32);
  const auto loaded = gyre::io::load_trained_model(file);
  REQUIRE(loaded.spec.temperature == std::vector<float>{1.75f});
  const auto rt = gyre::runtime::Model::load(file.string());
  REQUIRE(rt.architecture().temperature == std::vector<float>{1.75f});
  // An untempered copy: the same file without the key loads and gives sharper probabilities.
  const auto plain =
      with_header(file, "untempered.gyre", [](json& h) { h["architecture"].erase("temperature"); });
  const auto rt_plain = gyre::runtime::Model::load(plain.string());
  gyre::runtime::Context a(rt), b(rt_plain);
  const auto& pa = a.classify("kettle broken again");
  const float top_calibrated = pa.probabilities[pa.best];
  const auto& pb = b.classify("kettle broken again");
  REQUIRE(pb.best == pa.best);
  CHECK(top_calibrated <= pb.probabilities[pb.best] + 1e-7f);  // T > 1 softens
}

TEST_CASE("per-label thresholds: stored, read back, applied alike by the library and the runtime", "[io]") {
  auto spec = classifier_spec();
  spec.output = gyre::model::OutputKind::kSigmoid;
  auto trained = gyre::test::random_model(spec, 13);
  // Texts as vocabulary ids; the library's sigmoid probabilities for each.
  const std::vector<std::vector<std::string>> texts = {{"the", "kettle", "please"},
                                                       {"can", "you", "come", "on", "monday", "?"},
                                                       {"oven", "!"},
                                                       {"washer", "at", "3pm", "is", "fine"},
                                                       {"thanks", "."},
                                                       {"fridge", "dryer", "kettle"},
                                                       {"please", "come", "at", "3pm"},
                                                       {"the", "oven", "is", "fine", ","}};
  std::vector<gyre::data::EncodedExample> encoded;
  for (const auto& t : texts) {
    gyre::data::EncodedExample ex;
    for (const auto& token : t) ex.ids.push_back(trained.vocab.vocab.id(token));
    ex.targets = {0};
    encoded.push_back(std::move(ex));
  }
  std::vector<std::size_t> all(encoded.size());
  for (std::size_t i = 0; i < all.size(); ++i) all[i] = i;
  gyre::data::Batch batch;
  gyre::data::fill_batch(encoded, all, batch);
  gyre::model::Prediction pred;
  trained.model->predict(batch, pred);
  const std::size_t C = trained.spec.labels.size();
  // Per label, a threshold midway between the 4th and 5th highest probabilities: four texts
  // chosen per label, a different threshold for each label, none near a probability.
  std::vector<float> thresholds;
  std::vector<std::vector<float>> probs(encoded.size());
  for (std::size_t c = 0; c < C; ++c) {
    std::vector<float> column;
    for (std::size_t b = 0; b < encoded.size(); ++b) {
      const auto row = static_cast<Eigen::Index>(std::find(batch.examples.begin(), batch.examples.end(), b) -
                                                 batch.examples.begin());
      column.push_back(pred.probs(row, static_cast<Eigen::Index>(c)));
      probs[b].push_back(column.back());
    }
    std::sort(column.begin(), column.end(), std::greater<>());
    REQUIRE(column[3] - column[4] > 1e-4f);
    thresholds.push_back((column[3] + column[4]) / 2);
  }
  trained.model->set_thresholds(0.5f, thresholds);
  trained.spec = trained.model->spec();
  const fs::path file = tmp_dir() / "label-thresholds.gyre";
  gyre::io::export_model(trained, file, gyre::runtime::DType::kF32);

  // Read back exactly by both readers (shortest decimal that reads back as the same float).
  CHECK(gyre::io::load_trained_model(file).spec.label_thresholds == thresholds);
  const auto rt = gyre::runtime::Model::load(file.string());
  CHECK(rt.architecture().label_thresholds == thresholds);
  // The runtime's chosen labels are the library's probabilities decided at each label's threshold.
  gyre::runtime::Context ctx(rt);
  std::size_t differs_from_global = 0;
  for (std::size_t b = 0; b < encoded.size(); ++b) {
    const std::vector<std::uint32_t> ids(encoded[b].ids.begin(), encoded[b].ids.end());
    const auto& r = ctx.classify_ids(ids);
    std::vector<std::uint32_t> expected;
    for (std::uint32_t c = 0; c < C; ++c) {
      CHECK(std::fabs(r.probabilities[c] - probs[b][c]) < 1e-5f);
      if (probs[b][c] >= trained.spec.threshold_of(c)) expected.push_back(c);
      differs_from_global += (probs[b][c] >= thresholds[c]) != (probs[b][c] >= 0.5f);
    }
    CHECK(std::vector<std::uint32_t>(r.chosen.begin(), r.chosen.end()) == expected);
  }
  CHECK(differs_from_global > 0);  // the test would not tell the thresholds apart otherwise

  SECTION("a file without the key (written before it existed) loads; every label uses the global threshold") {
    const auto old = with_header(file, "no-label-thresholds.gyre",
                                 [](json& h) { h["architecture"].erase("label_thresholds"); });
    const auto lib = gyre::io::load_trained_model(old);
    CHECK(lib.spec.label_thresholds.empty());
    const auto rt_old = gyre::runtime::Model::load(old.string());
    gyre::runtime::Context c_old(rt_old);
    for (std::size_t b = 0; b < encoded.size(); ++b) {
      const std::vector<std::uint32_t> ids(encoded[b].ids.begin(), encoded[b].ids.end());
      const auto& r = c_old.classify_ids(ids);
      for (std::uint32_t c = 0; c < C; ++c) {
        CHECK(rt_old.architecture().threshold_of(c) == 0.5f);
        const bool chosen = std::find(r.chosen.begin(), r.chosen.end(), c) != r.chosen.end();
        CHECK(chosen == (r.probabilities[c] >= 0.5f));
      }
    }
  }
  SECTION("a bad list is refused by both readers") {
    refused_by_both(with_header(file, "lt-count.gyre",
                                [](json& h) {
                                  h["architecture"]["label_thresholds"] = json::array({0.2, 0.4});
                                }),
                    "\"architecture.label_thresholds\" has 2 values for 3 labels");
    refused_by_both(
        with_header(file, "lt-one.gyre", [](json& h) { h["architecture"]["label_thresholds"][1] = 1.0; }),
        "every threshold must be a number in (0, 1)");
    refused_by_both(with_header(file, "lt-empty.gyre",
                                [](json& h) { h["architecture"]["label_thresholds"] = json::array(); }),
                    "must be a non-empty array of numbers");
  }
  SECTION("eval and predict --multi-label-threshold: one threshold replaces them all") {
    auto lib = gyre::io::load_trained_model(file);
    gyre::io::set_multi_label_threshold(lib, 0.25f);
    CHECK(lib.spec.label_thresholds.empty());
    CHECK(lib.model->spec().threshold_of(2) == 0.25f);
    auto softmax = gyre::io::load_trained_model(exported(gyre::runtime::DType::kF32, "softmax-lt.gyre"));
    CHECK_THROWS_WITH(gyre::io::set_multi_label_threshold(softmax, 0.25f),
                      Contains("is not a multi-label model"));
  }
}

TEST_CASE("NaN or infinite weights and overflowing int8 scales are refused (issue 10 item 7)", "[io]") {
  const fs::path f32 = exported(gyre::runtime::DType::kF32, "finite32.gyre");
  const fs::path i8 = exported(gyre::runtime::DType::kI8, "finite8.gyre");
  const fs::path f16 = exported(gyre::runtime::DType::kF16, "finite16.gyre");
  SECTION("NaN bias") {
    const auto f = with_bytes(f32, "nan.gyre", [](auto& b, const auto& file) {
      put_f32(b, file.tensor("readout.b").offset + 4, std::numeric_limits<float>::quiet_NaN());
    });
    refused_by_both(f, "tensor \"readout.b\": element 1 is not a finite number");
  }
  SECTION("infinite weight") {
    const auto f = with_bytes(f32, "inf.gyre", [](auto& b, const auto& file) {
      put_f32(b, file.tensor("rnn.l0.fwd.w_hidden").offset, -std::numeric_limits<float>::infinity());
    });
    refused_by_both(f, "tensor \"rnn.l0.fwd.w_hidden\": element 0 is not a finite number");
  }
  SECTION("f16 infinity (exponent bits all ones)") {
    const auto f = with_bytes(f16, "inf16.gyre", [](auto& b, const auto& file) {
      const auto off = file.tensor("tokens.vectors").offset + 2 * 7;
      b[off] = 0x00;
      b[off + 1] = 0x7C;
    });
    refused_by_both(f, "tensor \"tokens.vectors\": element 7 is not a finite number");
  }
  SECTION("int8 scale of 3e38: finite, but 127 x scale is not") {
    const auto f = with_bytes(i8, "scale.gyre", [](auto& b, const auto& file) {
      put_f32(b, file.tensor("readout.w").scales_offset + 4, 3e38f);
    });
    refused_by_both(f, "scale of row 1 is 3e+38");
  }
}

TEST_CASE("a file another writer made with labels in its own order loads in the library too", "[io]") {
  // tools/make_runtime_fixtures.py writes labels in class order, not sorted ("O, B-date, I-date,
  // B-part"); the library used to refuse such files while the runtime read them.
  const fs::path fixture = fs::path(GYRE_FIXTURES_DIR) / "runtime" / "torch_gru_bi_tag.gyre";
  const auto trained = gyre::io::load_trained_model(fixture);
  REQUIRE(trained.spec.labels == std::vector<std::string>{"O", "B-date", "I-date", "B-part"});
  REQUIRE(trained.vocab.labels.find("B-part") == 3);
  REQUIRE(trained.spec.tag_scheme == gyre::data::TagScheme::kBio);
}

TEST_CASE("the runtime refuses a training checkpoint with a clear message", "[io]") {
  const fs::path model = exported(gyre::runtime::DType::kF32, "ckpt-src.gyre");
  const auto f = with_header(model, "as-checkpoint.bin", [](json& h) { h["format"] = "gyre-checkpoint"; });
  REQUIRE_NOTHROW(gyre::io::load_trained_model(f));
  REQUIRE_THROWS_WITH(gyre::runtime::Model::load(f.string()),
                      Contains("a training checkpoint, not an exported model"));
}

TEST_CASE("format version 1 (tensor names before the rename) is refused with advice to retrain", "[io]") {
  const fs::path good = exported(gyre::runtime::DType::kF32, "v2.gyre");
  // The same bytes with version 1 in the preamble (offset 8, docs/model-format.md) and a fresh CRC.
  const auto v1 = with_bytes(good, "v1.gyre", [](auto& b, const auto&) {
    b[8] = 1;
    b[9] = b[10] = b[11] = 0;
  });
  for (const auto& load : std::vector<std::function<void()>>{
           [&] { gyre::io::load_trained_model(v1); }, [&] { gyre::runtime::Model::load(v1.string()); }}) {
    REQUIRE_THROWS_WITH(load(),
                        Contains(v1.string() + ": file format version 1 was written by an older gyre") &&
                            Contains("retrain with this gyre"));
  }
  SECTION("a run directory with only the old checkpoint names names the file and says to retrain") {
    const fs::path run = tmp_dir() / "v1-run";
    fs::remove_all(run);  // a rerun must not find the selected.bin copied below
    fs::create_directories(run);
    fs::copy_file(v1, run / "checkpoint-best.bin", fs::copy_options::overwrite_existing);
    REQUIRE_THROWS_WITH(gyre::io::resolve_model_path(run),
                        Contains("its checkpoint-best.bin is model-format version 1") && Contains("retrain"));
    fs::copy_file(good, run / gyre::io::kSelectedCheckpointFile, fs::copy_options::overwrite_existing);
    REQUIRE(gyre::io::resolve_model_path(run) == run / "selected.bin");
  }
}

#ifdef GYRE_CLI_PATH
TEST_CASE("predict and eval exit with code 2 on a crafted model file", "[io][cli]") {
  REQUIRE(fs::exists(GYRE_CLI_PATH));  // ctest runs after the whole build
  const fs::path good = exported(gyre::runtime::DType::kF32, "cli.gyre");
  const auto layers =
      with_header(good, "cli-layers.gyre", [](json& h) { h["architecture"]["layers"] = 1000000; });
  const auto nan = with_bytes(good, "cli-nan.gyre", [](auto& b, const auto& file) {
    put_f32(b, file.tensor("readout.b").offset, std::numeric_limits<float>::quiet_NaN());
  });
  const fs::path data = tmp_dir() / "cli.tsv";
  std::ofstream(data) << "book\tcan you come on monday\ncancel\tthanks\n";
  for (const fs::path& f : {layers, nan}) {
    CAPTURE(f.string());
    const std::string predict =
        "echo 'the kettle' | " + std::string(GYRE_CLI_PATH) + " predict " + f.string() + " 2>/dev/null";
    REQUIRE(WEXITSTATUS(std::system(predict.c_str())) == 2);
    const std::string eval =
        std::string(GYRE_CLI_PATH) + " eval " + f.string() + " --test " + data.string() + " >/dev/null 2>&1";
    REQUIRE(WEXITSTATUS(std::system(eval.c_str())) == 2);
  }
}
#endif

TEST_CASE("a character encoder in the header: keys, list and tensors are checked by both readers", "[io]") {
  auto spec = classifier_spec();
  spec.char_embedding_size = 3;
  spec.char_filters = 4;
  spec.char_width = 3;
  const auto trained = gyre::test::random_model(spec, 9);
  const fs::path good = tmp_dir() / "chars.gyre";
  gyre::io::export_model(trained, good, gyre::runtime::DType::kF32);
  REQUIRE_NOTHROW(gyre::io::load_trained_model(good));
  REQUIRE(gyre::runtime::Model::load(good.string()).character_count() == trained.vocab.characters.size());
  struct Case {
    const char* name;
    std::function<void(json&)> edit;
    const char* message;
  };
  const Case cases[] = {
      {"one size missing", [](json& h) { h["architecture"].erase("char_width"); },
       "go together (all or none)"},
      {"even width", [](json& h) { h["architecture"]["char_width"] = 4; },
       "\"architecture.char_width\" must be odd"},
      {"no character list", [](json& h) { h.erase("characters"); }, "\"characters\""},
      {"repeated character", [](json& h) { h["characters"][3] = h["characters"][2]; },
       "appears twice in \"characters\""},
      {"reserved entries not first", [](json& h) { std::swap(h["characters"][0], h["characters"][1]); },
       "\"characters\" must start with \"<pad>\", \"<unk>\""},
      {"a list that disagrees with the tensor", [](json& h) { h["characters"].push_back("\xc3\xa9"); },
       "tensor \"chars.vectors\" has shape"},
  };
  for (const auto& c : cases) {
    DYNAMIC_SECTION(c.name) {
      refused_by_both(with_header(good, "chars-case.gyre", c.edit), c.message);
    }
  }
  SECTION("a character list without a character encoder") {
    const fs::path plain = exported(gyre::runtime::DType::kF32, "plain-chars.gyre");
    refused_by_both(with_header(plain, "plain-case.gyre",
                                [](json& h) {
                                  h["characters"] = json::array({"<pad>", "<unk>", "a"});
                                }),
                    "only for a model with a character encoder");
  }
  SECTION("int8 and f16 files run the encoder close to f32") {
    // Tolerance 0.05 on probabilities: quantisation error of a small random model (our choice).
    const auto f32 = gyre::runtime::Model::load(good.string());
    gyre::runtime::Context c32(f32);
    for (const auto precision : {gyre::runtime::DType::kF16, gyre::runtime::DType::kI8}) {
      const fs::path q = tmp_dir() / "chars-q.gyre";
      gyre::io::export_model(trained, q, precision);
      const auto model = gyre::runtime::Model::load(q.string());
      gyre::runtime::Context ctx(model);
      for (const char* text : {"Can you come at 3pm?", "the KETTLE leaks", "zoë"}) {
        const auto& a = c32.classify(text);
        const std::vector<float> ref(a.probabilities.begin(), a.probabilities.end());
        const auto& b = ctx.classify(text);
        for (std::size_t k = 0; k < ref.size(); ++k)
          REQUIRE_THAT(b.probabilities[k], Catch::Matchers::WithinAbs(ref[k], 0.05));
      }
    }
  }
  SECTION("the ids overloads without characters are refused for such a model") {
    const auto model = gyre::runtime::Model::load(good.string());
    gyre::runtime::Context ctx(model);
    const std::vector<std::uint32_t> ids{2, 3};
    REQUIRE_THROWS_WITH(ctx.classify_ids(ids), Contains("has a character encoder"));
    const std::vector<std::int32_t> chars{2, 3, 4}, bad_offsets{0, 2};
    REQUIRE_THROWS_WITH(ctx.classify_ids(ids, chars, bad_offsets), Contains("character offsets"));
    const std::vector<std::int32_t> offsets{0, 2, 3};
    REQUIRE(ctx.classify_ids(ids, chars, offsets).probabilities.size() == 3);
  }
}

// ---- n-gram part (docs/model-format.md "N-gram part") ------------------------------------------

namespace {

const std::vector<std::vector<std::string>> kNgramTexts = {
    {"the", "kettle", "please"},
    {"can", "you", "come", "on", "monday", "?"},
    {"oven", "!"},
    {"washer", "at", "3pm", "is", "fine"},
    {"zo\xc3\xab", "says", "the", "oven", "is", "fine"}};

/// Keys that share more than 255 bytes with the key before them (the format's cap on `shared`).
std::vector<std::string> long_keys() {
  const std::string stem(300, 'k');
  return {stem + "a", stem + "b", stem + "b" + std::string(40, 'z'), stem + "c"};
}

gyre::io::TrainedModel with_part(std::uint64_t seed, float mix = 0.8f) {
  auto trained = gyre::test::random_model(classifier_spec(), seed);
  trained.ngram_part = gyre::test::random_ngram_part(kNgramTexts, 2, 3, seed + 1, mix, long_keys());
  return trained;
}

void same_part(const gyre::runtime::NgramPart& a, const gyre::runtime::NgramPart& b) {
  REQUIRE(a.order() == b.order());
  REQUIRE(a.mix() == b.mix());
  REQUIRE(a.keys() == b.keys());
  REQUIRE(a.weights() == b.weights());
  REQUIRE(a.bias() == b.bias());
}

}  // namespace

TEST_CASE("n-gram keys: front coding round trip, and every malformed list refused", "[io][ngram]") {
  std::vector<std::string> keys = long_keys();
  for (const auto& t : kNgramTexts) gyre::runtime::ngram_keys(t, 3, keys);
  keys.push_back(std::string("\xff\xfe", 2));  // bytes above 0x7F sort after ASCII (unsigned)
  keys.push_back(std::string(200, 'x'));       // a length that needs two LEB128 bytes
  std::sort(keys.begin(), keys.end());
  keys.erase(std::unique(keys.begin(), keys.end()), keys.end());
  const auto blob = gyre::runtime::encode_ngram_keys(keys);
  CHECK(gyre::runtime::decode_ngram_keys(blob.data(), blob.size(), keys.size(), "k") == keys);
  std::size_t plain = 0;
  for (const auto& k : keys) plain += k.size();
  CHECK(blob.size() < plain);  // sorted keys share prefixes
  using gyre::runtime::Error;
  auto decode = [](std::vector<unsigned char> b, std::size_t n) {
    return gyre::runtime::decode_ngram_keys(b.data(), b.size(), n, "keys");
  };
  // {shared, length, bytes...} per key.
  CHECK(decode({0, 1, 'a', 0, 1, 'b'}, 2) == std::vector<std::string>{"a", "b"});
  CHECK(decode({0, 2, 'a', 'b', 1, 1, 'c'}, 2) == std::vector<std::string>{"ab", "ac"});
  CHECK_THROWS_WITH(decode({0, 1, 'b', 0, 1, 'a'}, 2), Contains("key 1") && Contains("sorted"));
  CHECK_THROWS_WITH(decode({0, 1, 'a', 0, 1, 'a'}, 2), Contains("sorted bytewise and unique"));
  CHECK_THROWS_WITH(decode({0, 2, 'a', 'b', 1, 1, 'a'}, 2), Contains("sorted"));  // "aa" after "ab"
  CHECK(decode({0, 2, 'a', 'b', 2, 1, 'a'}, 2) == std::vector<std::string>{"ab", "aba"});
  CHECK_THROWS_WITH(decode({0, 1, 'a', 2, 1, 'b'}, 2), Contains("shares more bytes"));
  CHECK_THROWS_WITH(decode({0, 0, 'x', 0, 1, 'a'}, 2), Contains("outside 1.."));  // empty key
  CHECK_THROWS_WITH(decode({0, 5, 'a', 'b'}, 1), Contains("runs past the end"));  // truncated
  CHECK_THROWS_WITH(decode({0, 1, 'a', 0, 1, 'b', 7}, 2), Contains("1 bytes left"));
  CHECK_THROWS_WITH(decode({0, 1, 'a'}, 2), Contains("cannot fit"));
  CHECK_THROWS_WITH(decode({0, 0x80, 0x80, 0x80, 0x80, 0x01, 'a'}, 1), Contains("length field too long"));
  CHECK_THROWS_AS(gyre::runtime::encode_ngram_keys({"b", "a"}), Error);
  CHECK_THROWS_AS(gyre::runtime::encode_ngram_keys({""}), Error);
}

TEST_CASE("n-gram part: checkpoints and exported files keep it, and files without one still load",
          "[io][ngram]") {
  const auto trained = with_part(31);
  REQUIRE(trained.ngram_part.features() > 40);
  SECTION("checkpoint (f32, exact)") {
    const fs::path ckpt = tmp_dir() / "ngram-ckpt.bin";
    gyre::io::write_checkpoint(ckpt, *trained.model, trained.vocab, nullptr, json::object(), json::object(),
                               &trained.ngram_part);
    const auto back = gyre::io::load_trained_model(ckpt);
    same_part(back.ngram_part, trained.ngram_part);
    CHECK(back.header["architecture"]["ngram"] ==
          json({{"order", 2}, {"mix", 0.8}, {"keys", trained.ngram_part.features()}}));
    // A checkpoint rewritten without the part (as before the part existed) has none.
    gyre::io::write_checkpoint(ckpt, *trained.model, trained.vocab, nullptr, json::object(), json::object());
    CHECK(gyre::io::load_trained_model(ckpt).ngram_part.empty());
  }
  SECTION("exported f32 (exact), and the runtime reads the same part") {
    const fs::path file = tmp_dir() / "ngram-f32.gyre";
    gyre::io::export_model(trained, file, gyre::runtime::DType::kF32);
    same_part(gyre::io::load_trained_model(file).ngram_part, trained.ngram_part);
    const auto rt = gyre::runtime::Model::load(file.string());
    CHECK(rt.architecture().has_ngram_part());
    CHECK(rt.architecture().ngram_keys == trained.ngram_part.features());
    const auto f = gyre::runtime::ModelFile::open(file.string());
    CHECK(f.tensor("ngram.keys").dtype == gyre::runtime::DType::kU8);
    CHECK(f.tensor("ngram.w").rows == 3);  // class-major
    CHECK(f.tensor("ngram.b").dtype == gyre::runtime::DType::kF32);
  }
  SECTION("f16 and int8: weights stored in the precision, within its rounding") {
    for (const auto dtype : {gyre::runtime::DType::kF16, gyre::runtime::DType::kI8}) {
      CAPTURE(gyre::runtime::to_string(dtype));
      const fs::path file = tmp_dir() / "ngram-q.gyre";
      gyre::io::export_model(trained, file, dtype);
      CHECK(gyre::runtime::ModelFile::open(file.string()).tensor("ngram.w").dtype == dtype);
      const auto back = gyre::io::load_trained_model(file).ngram_part;
      REQUIRE(back.keys() == trained.ngram_part.keys());
      REQUIRE(back.bias() == trained.ngram_part.bias());  // f32 always
      // |w| <= 2: f16 rounds to within 2^-11 relative (IEEE 754 binary16, 11-bit significand);
      // int8 to within half a step of max|column| / 127 (one scale per class).
      const double tol = dtype == gyre::runtime::DType::kF16 ? 2.0 * std::ldexp(1.0, -11) : 0.5 * 2.0 / 127.0;
      for (std::size_t i = 0; i < back.weights().size(); ++i)
        REQUIRE(std::abs(back.weights()[i] - trained.ngram_part.weights()[i]) <= tol + 1e-7);
    }
  }
  SECTION("a file written without a part has none (old files load unchanged)") {
    const fs::path file = exported(gyre::runtime::DType::kF32, "ngram-none.gyre");
    CHECK(gyre::io::load_trained_model(file).ngram_part.empty());
    CHECK_FALSE(gyre::runtime::Model::load(file.string()).architecture().has_ngram_part());
  }
}

TEST_CASE("n-gram part: malformed or truncated parts are refused by both loaders", "[io][ngram]") {
  const auto trained = with_part(41);
  const fs::path good = tmp_dir() / "ngram-good.gyre";
  gyre::io::export_model(trained, good, gyre::runtime::DType::kF32);
  REQUIRE_NOTHROW(gyre::io::load_trained_model(good));
  const auto K = trained.ngram_part.features();
  SECTION("header: keys count disagrees with ngram.w") {
    refused_by_both(
        with_header(good, "ng1.gyre", [&](json& h) { h["architecture"]["ngram"]["keys"] = K + 1; }),
        "tensor \"ngram.w\" has shape [3 x " + std::to_string(K) + "]");
  }
  SECTION("header: fewer keys than the list holds") {
    refused_by_both(with_header(good, "ng2.gyre", [&](json& h) { h["architecture"]["ngram"]["keys"] = 1; }),
                    "tensor \"ngram.w\" has shape");
  }
  SECTION("header: bounds and keys") {
    refused_by_both(with_header(good, "ng3.gyre", [](json& h) { h["architecture"]["ngram"]["order"] = 7; }),
                    "\"architecture.ngram.order\" must be an integer in [1, 6]");
    refused_by_both(with_header(good, "ng4.gyre", [](json& h) { h["architecture"]["ngram"]["mix"] = 0; }),
                    "\"architecture.ngram.mix\" must be a number in (0, 1000]");
    refused_by_both(with_header(good, "ng5.gyre", [](json& h) { h["architecture"]["ngram"]["idf"] = true; }),
                    "unknown key \"architecture.ngram.idf\"");
    refused_by_both(with_header(good, "ng6.gyre", [](json& h) { h["architecture"]["ngram"] = 2; }),
                    "\"architecture.ngram\" must be an object");
  }
  SECTION("a part on a multi-label model") {
    refused_by_both(with_header(good, "ng7.gyre",
                                [](json& h) {
                                  h["architecture"]["output"] = "sigmoid";
                                  h["architecture"]["multi_label_threshold"] = 0.5;
                                }),
                    "only for classifiers with output \"softmax\"");
  }
  SECTION("tensors: missing, numbers as bytes, bytes as numbers") {
    const auto file = gyre::runtime::ModelFile::open(good.string());
    auto rewrite =
        [&](const std::string& name,
            const std::function<void(gyre::runtime::ModelFileWriter&, const gyre::runtime::TensorInfo&)>& f) {
          gyre::runtime::ModelFileWriter w{std::string(file.header_json())};
          for (const auto& t : file.tensors()) f(w, t);
          const fs::path out = tmp_dir() / name;
          w.write(out.string());
          return out;
        };
    auto copy = [&](gyre::runtime::ModelFileWriter& w, const gyre::runtime::TensorInfo& t) {
      if (t.dtype == gyre::runtime::DType::kU8)
        w.add_bytes(t.name, {static_cast<const unsigned char*>(t.data), static_cast<std::size_t>(t.bytes)});
      else
        w.add_tensor(t.name, t.shape, file.read_f32(t), t.dtype);
    };
    refused_by_both(rewrite("ng8.gyre",
                            [&](auto& w, const auto& t) {
                              if (t.name != "ngram.keys") copy(w, t);
                            }),
                    "tensor \"ngram.keys\" is missing");
    refused_by_both(rewrite("ng9.gyre",
                            [&](auto& w, const auto& t) {
                              if (t.name == "ngram.keys")
                                w.add_tensor(t.name, 1, t.bytes, std::vector<float>(t.bytes, 1.0f));
                              else
                                copy(w, t);
                            }),
                    "tensor \"ngram.keys\" must be u8 bytes");
    refused_by_both(rewrite("ng10.gyre",
                            [&](auto& w, const auto& t) {
                              if (t.name == "readout.b")
                                w.add_bytes(t.name, std::vector<unsigned char>(12, 0));
                              else
                                copy(w, t);
                            }),
                    "tensor \"readout.b\" holds bytes (u8)");
    refused_by_both(rewrite("ng11.gyre",
                            [&](auto& w, const auto& t) {
                              if (t.name == "ngram.keys") {
                                // The list cut short: its last key is gone.
                                const auto* p = static_cast<const unsigned char*>(t.data);
                                w.add_bytes(t.name, {p, static_cast<std::size_t>(t.bytes) - 2});
                              } else {
                                copy(w, t);
                              }
                            }),
                    "n-gram part: ngram.keys: key " + std::to_string(K - 1));
  }
  SECTION("key bytes changed in place (checksum recomputed): unsorted keys") {
    const auto f = with_bytes(good, "ng12.gyre", [](std::vector<unsigned char>& b, const auto& file) {
      const auto& t = file.tensor("ngram.keys");
      // Key 0 is {0, len, bytes}; make its first byte 0xFF so key 1 sorts before it.
      b[t.offset + 2] = 0xFF;
    });
    refused_by_both(f, "is not greater than the key before it");
  }
}

#ifdef GYRE_CLI_PATH
TEST_CASE("n-gram part: gyre export prints its share and gyre inspect shows it", "[io][ngram][cli]") {
  REQUIRE(fs::exists(GYRE_CLI_PATH));  // ctest runs after the whole build
  const auto trained = with_part(51, 0.5f);
  const fs::path ckpt = tmp_dir() / "ngram-cli.bin";
  gyre::io::write_checkpoint(ckpt, *trained.model, trained.vocab, nullptr, json::object(), json::object(),
                             &trained.ngram_part);
  const fs::path out = tmp_dir() / "ngram-cli.gyre", log = tmp_dir() / "ngram-cli.txt";
  const std::string cmd = std::string(GYRE_CLI_PATH) + " export " + ckpt.string() + " --out " + out.string() +
                          " --precision int8 > " + log.string() + " 2>&1 && " + GYRE_CLI_PATH + " inspect " +
                          out.string() + " --no-tensors >> " + log.string() + " 2>&1";
  REQUIRE(WEXITSTATUS(std::system(cmd.c_str())) == 0);
  std::ifstream in(log);
  const std::string text((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
  CAPTURE(text);
  const std::string keys = std::to_string(trained.ngram_part.features()) + " keys";
  CHECK_THAT(text, Contains("n-gram part: order 2, " + keys + ", mix 0.5: "));
  CHECK_THAT(text, Contains("% of the file"));
  CHECK_THAT(text, Contains("n-gram part  order 2, " + keys + ", mix 0.5, weights i8; "));
  // eval, predict and predict --why run the exported file in the runtime, which needs the words:
  // they pass them (an id-only call would be refused).
  const fs::path data = tmp_dir() / "ngram-cli.tsv";
  std::ofstream(data) << "book\tcan you come on monday\ncancel\tthe kettle is fine !\npraise\tthanks\n";
  const std::string eval = std::string(GYRE_CLI_PATH) + " eval " + out.string() + " --test " + data.string() +
                           " > " + log.string() + " 2>&1";
  CHECK(WEXITSTATUS(std::system(eval.c_str())) == 0);
  const std::string predict = "printf 'can you come on monday\\nthanks\\n' | " + std::string(GYRE_CLI_PATH) +
                              " predict " + out.string() + " --format jsonl --why > " + log.string() +
                              " 2>&1";
  CHECK(WEXITSTATUS(std::system(predict.c_str())) == 0);
  // The runtime's probabilities for a line equal Context::classify of the text.
  std::ifstream pin(log);
  std::string first;
  std::getline(pin, first);
  CAPTURE(first);
  const auto rt = gyre::runtime::Model::load(out.string());
  gyre::runtime::Context ctx(rt);
  const auto& r = ctx.classify("can you come on monday");
  const json line = json::parse(first);
  CHECK(line["top"][0]["label"] == rt.labels()[r.best]);
  CHECK(std::abs(line["top"][0]["probability"].get<double>() - r.probabilities[r.best]) < 1e-6);
  CHECK(line["why"]["method"] == "occlusion");
}
#endif
