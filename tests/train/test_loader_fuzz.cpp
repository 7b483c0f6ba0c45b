// Mutation fuzzing of the training library's loaders (issue 10): exported model files
// (f32/f16/int8; classifier, CRF tagger, stacked bidirectional GRU) through
// io::load_trained_model with both engines, training checkpoints through
// io::restore_checkpoint, and a run directory through train::resume. Inputs are valid files
// with seeded random damage: bit flips, boundary values written over preamble and table fields,
// truncation and extension, and edits of the JSON header (values replaced by extremes, wrong
// types, members removed). Most mutants get a recomputed CRC-32C trailer so the checks behind
// the checksum are reached too. Every loader must either accept the file or throw a gyre::Error
// (exit code 1 or 2 in the CLI): any other exception fails the test, and under the
// AddressSanitizer/UBSan build (CI) so does any memory error. A failing input is saved under
// GYRE_TEST_TMP_DIR/loader-fuzz/artifacts/ and the seed printed.
//
// The runtime's own loader is fuzzed with libFuzzer (tests/fuzz/run_fuzz.sh); this test covers
// the library's code above it (its header members, optimizer state, trainer state), which
// libFuzzer would need the whole library rebuilt with clang to reach.
//
// Time: "[fuzz]" runs a fixed number of mutants in every test run; the "[slow]" variant runs for
// GYRE_FUZZ_SECONDS (default 60) seconds.

#include <catch2/catch.hpp>

#include <chrono>
#include <cstdlib>
#include <cstring>
#include <filesystem>
#include <fstream>
#include <functional>
#include <string>
#include <typeinfo>
#include <vector>

#include <nlohmann/json.hpp>

#include "gyre/core/error.hpp"
#include "gyre/core/file.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/io/model_io.hpp"
#include "gyre/optim/optimizer.hpp"
#include "gyre/runtime/error.hpp"
#include "gyre/runtime/model.hpp"
#include "gyre/train/trainer.hpp"
#include "runtime/detail/checksum.hpp"
#include "support/learnable_corpus.hpp"
#include "support/random_model.hpp"

namespace fs = std::filesystem;
using nlohmann::json;
using Bytes = std::vector<unsigned char>;

namespace {

fs::path work_dir() {
  const fs::path dir = fs::path(GYRE_TEST_TMP_DIR) / "loader-fuzz";
  fs::create_directories(dir / "artifacts");
  return dir;
}

Bytes read_bytes(const fs::path& path) {
  std::ifstream in(path, std::ios::binary);
  return Bytes((std::istreambuf_iterator<char>(in)), std::istreambuf_iterator<char>());
}

void write_bytes(const fs::path& path, const Bytes& bytes) {
  std::ofstream out(path, std::ios::binary | std::ios::trunc);
  out.write(reinterpret_cast<const char*>(bytes.data()), static_cast<std::streamsize>(bytes.size()));
}

gyre::model::ModelSpec spec_of(gyre::data::Task task, gyre::nn::CellType cell, int layers, bool bidirectional,
                               gyre::model::OutputKind output, std::vector<std::string> labels) {
  gyre::model::ModelSpec s;
  s.task = task;
  s.cell = cell;
  s.embedding_size = 6;
  s.hidden_size = 5;
  s.layers = layers;
  s.bidirectional = bidirectional;
  s.output = output;
  s.labels = std::move(labels);
  if (task == gyre::data::Task::kTag) s.tag_scheme = gyre::data::TagScheme::kBio;
  return s;
}

struct Seed {
  std::string name;
  Bytes bytes;
  bool checkpoint = false;
  gyre::model::ModelSpec spec;  // checkpoints: the spec to restore into
};

// Valid inputs to start from: exported files of three architectures in three precisions, and a
// checkpoint with Adam's moments and a trainer state; the softmax classifier once more with an
// n-gram part (docs/model-format.md "N-gram part").
const std::vector<Seed>& seeds() {
  static const std::vector<Seed> all = [] {
    using gyre::data::Task;
    using gyre::model::OutputKind;
    using gyre::nn::CellType;
    std::vector<Seed> out;
    const gyre::model::ModelSpec specs[] = {
        spec_of(Task::kClassify, CellType::kLstm, 1, false, OutputKind::kSoftmax,
                {"book", "cancel", "praise"}),
        spec_of(Task::kTag, CellType::kLstm, 1, true, OutputKind::kCrf, {"O", "B-date", "I-date"}),
        spec_of(Task::kClassify, CellType::kGru, 2, true, OutputKind::kSigmoid, {"billing", "repair"}),
        spec_of(Task::kClassify, CellType::kLstm, 1, false, OutputKind::kSoftmax,
                {"book", "cancel", "praise"}),
    };
    const gyre::runtime::DType precisions[] = {gyre::runtime::DType::kF32, gyre::runtime::DType::kF16,
                                               gyre::runtime::DType::kI8};
    int n = 0;
    for (const auto& spec : specs) {
      auto trained = gyre::test::random_model(spec, 40 + static_cast<std::uint64_t>(n));
      if (&spec == &specs[3])
        trained.ngram_part = gyre::test::random_ngram_part(
            {{"can", "you", "come", "on", "monday"}, {"the", "kettle", "is", "fine", "!"}}, 2, 3, 77, 0.6f);
      for (const auto precision : precisions) {
        const fs::path file = work_dir() / ("seed" + std::to_string(n++) + ".gyre");
        gyre::io::export_model(trained, file, precision);
        out.push_back({file.filename().string(), read_bytes(file), false, trained.spec});
      }
      auto optimizer = gyre::optim::make_optimizer(gyre::optim::OptimizerKind::kAdam, {});
      optimizer->bind(trained.model->params());
      const fs::path ckpt = work_dir() / ("seed" + std::to_string(n++) + ".bin");
      const json state = {{"epoch", 1}, {"step", 3}, {"global_step", 7}, {"schedule", json::object()}};
      gyre::io::write_checkpoint(ckpt, *trained.model, trained.vocab, optimizer.get(), state,
                                 json{{"hidden_size", 5}}, &trained.ngram_part);
      out.push_back({ckpt.filename().string(), read_bytes(ckpt), true, trained.spec});
    }
    return out;
  }();
  return all;
}

std::uint64_t load_u64(const Bytes& b, std::size_t at) {
  std::uint64_t v = 0;
  for (int i = 7; i >= 0; --i) v = (v << 8) | b[at + static_cast<std::size_t>(i)];
  return v;
}

void fix_crc(Bytes& b) {
  if (b.size() < 16) return;
  const std::uint32_t crc = gyre::runtime::detail::crc32c(b.data(), b.size() - 8);
  for (int i = 0; i < 4; ++i)
    b[b.size() - 8 + static_cast<std::size_t>(i)] = static_cast<unsigned char>(crc >> (8 * i));
}

// Every node of a JSON document, as a JSON pointer.
void pointers(const json& j, const json::json_pointer& at, std::vector<json::json_pointer>& out) {
  out.push_back(at);
  if (j.is_object())
    for (const auto& [k, v] : j.items()) pointers(v, at / k, out);
  else if (j.is_array())
    for (std::size_t i = 0; i < j.size(); ++i) pointers(j[i], at / i, out);
}

json extreme_value(gyre::Rng& rng) {
  switch (rng.below(16)) {
    case 0:
      return 0;
    case 1:
      return -1;
    case 2:
      return 1;
    case 3:
      return 2147483647;
    case 4:
      return 4294967296.0;
    case 5:
      return 1e300;
    case 6:
      return -1e300;
    case 7:
      return 0.5;
    case 8:
      return "";
    case 9:
      return "lstm";
    case 10:
      return nullptr;
    case 11:
      return true;
    case 12:
      return json::array();
    case 13:
      return json::object();
    case 14:
      return std::string(70000, 'a');
    default:
      return json::array({json::array(), 3, "x"});
  }
}

// The header JSON with one node replaced or removed, the tensors copied unchanged (so the file
// is well formed and checksummed: only the description is wrong).
bool mutate_header(const Bytes& in, Bytes& out, gyre::Rng& rng) {
  std::vector<std::pair<std::string, std::vector<float>>> values;
  std::vector<gyre::runtime::TensorInfo> infos;
  json h;
  try {
    const auto file = gyre::runtime::ModelFile::from_bytes(in, "seed");
    h = json::parse(file.header_json());
    for (const auto& t : file.tensors()) {
      infos.push_back(t);
      if (t.dtype == gyre::runtime::DType::kU8) {  // bytes (the n-gram keys): kept as they are
        const auto* p = static_cast<const unsigned char*>(t.data);
        values.emplace_back(t.name, std::vector<float>(p, p + t.bytes));
      } else {
        values.emplace_back(t.name, file.read_f32(t));
      }
    }
  } catch (const std::exception&) {
    return false;
  }
  for (int edits = 1 + static_cast<int>(rng.below(2)); edits > 0; --edits) {
    std::vector<json::json_pointer> all;
    pointers(h, json::json_pointer(), all);
    const auto& at = all[1 + rng.below(all.size() - 1)];  // never the root
    if (rng.below(4) == 0) {
      json& parent = h[at.parent_pointer()];
      if (parent.is_object())
        parent.erase(at.back());
      else if (parent.is_array() && !parent.empty())
        parent.erase(parent.size() - 1);
    } else {
      h[at] = extreme_value(rng);
    }
  }
  try {
    gyre::runtime::ModelFileWriter writer(h.dump());
    for (std::size_t i = 0; i < infos.size(); ++i) {
      if (infos[i].dtype == gyre::runtime::DType::kU8) {
        const std::vector<unsigned char> raw(values[i].second.begin(), values[i].second.end());
        writer.add_bytes(infos[i].name, raw);
      } else {
        writer.add_tensor(infos[i].name, infos[i].shape, values[i].second, infos[i].dtype);
      }
    }
    const fs::path tmp = work_dir() / "rewrite.tmp";
    writer.write(tmp.string());
    out = read_bytes(tmp);
  } catch (const std::exception&) {
    return false;  // the writer refused the edit: nothing to load
  }
  return true;
}

// Seeded damage to the bytes of a valid file.
Bytes mutate(const Seed& seed, gyre::Rng& rng) {
  Bytes b = seed.bytes;
  const std::size_t kind = rng.below(10);
  if (kind < 3) {
    Bytes edited;
    if (mutate_header(b, edited, rng)) return edited;
  }
  if (kind < 6) {  // bit flips anywhere
    for (std::size_t n = 1 + rng.below(8); n > 0; --n)
      b[rng.below(b.size())] ^= static_cast<unsigned char>(1u << rng.below(8));
  } else if (kind < 8) {  // a boundary value over an 8-byte field of the preamble or the tensor table
    const std::uint64_t table_end = std::min<std::uint64_t>(b.size() - 8, 64 + load_u64(b, 16) + 4096);
    const std::size_t at = static_cast<std::size_t>(rng.below(table_end / 8)) * 8;
    const std::uint64_t values[] = {0,     1,        63,           64, 0xFFFFFFFFull, 0x7FFFFFFFFFFFFFFFull,
                                    ~0ull, b.size(), b.size() + 64};
    const std::uint64_t v = values[rng.below(std::size(values))];
    for (int i = 0; i < 8 && at + static_cast<std::size_t>(i) < b.size(); ++i)
      b[at + static_cast<std::size_t>(i)] = static_cast<unsigned char>(v >> (8 * i));
  } else if (kind == 8) {  // truncated
    b.resize(rng.below(b.size()));
    return b;
  } else {  // extended
    b.resize(b.size() + 1 + rng.below(200), static_cast<unsigned char>(rng.below(256)));
  }
  if (rng.below(4) != 0) fix_crc(b);
  return b;
}

// Loads `bytes` the ways the library does; returns "" or what went wrong.
std::string try_load(const Seed& seed, const Bytes& bytes, const fs::path& path) {
  write_bytes(path, bytes);
  try {
    if (seed.checkpoint) {
      gyre::model::SequenceModel model(seed.spec);
      auto optimizer = gyre::optim::make_optimizer(gyre::optim::OptimizerKind::kAdam, {});
      gyre::io::restore_checkpoint(path, model, optimizer.get());
    } else {
      (void)gyre::io::load_trained_model(path, gyre::io::Engine::kLibrary);
      const auto exported = gyre::io::load_trained_model(path, gyre::io::Engine::kRuntimeForExported);
      if (exported.runtime) {  // a mutant the loader accepts must still run
        gyre::runtime::Context ctx(*exported.runtime);
        if (exported.runtime->architecture().task == gyre::runtime::Task::kTag)
          ctx.tag("can you come on monday");
        else
          ctx.classify("can you come on monday");
      }
    }
  } catch (const gyre::Error&) {
  } catch (const gyre::runtime::Error&) {
  } catch (const std::exception& e) {
    return std::string("escaped as ") + typeid(e).name() + ": " + e.what();
  }
  return "";
}

void fuzz(double seconds, std::size_t max_mutants, std::uint64_t rng_seed) {
  gyre::Rng rng(rng_seed);
  const auto& all = seeds();
  const fs::path path = work_dir() / "mutant.bin";
  const auto start = std::chrono::steady_clock::now();
  std::size_t mutants = 0;
  for (; mutants < max_mutants; ++mutants) {
    if (std::chrono::duration<double>(std::chrono::steady_clock::now() - start).count() > seconds) break;
    const Seed& seed = all[rng.below(all.size())];
    const Bytes bytes = mutate(seed, rng);
    const std::string failure = try_load(seed, bytes, path);
    if (!failure.empty()) {
      const fs::path saved =
          work_dir() / "artifacts" / ("mutant-" + std::to_string(rng_seed) + "-" + std::to_string(mutants));
      write_bytes(saved, bytes);
      FAIL_CHECK("seed " << rng_seed << ", mutant " << mutants << " of " << seed.name << " (saved as "
                         << saved.string() << "): " << failure);
    }
  }
  INFO("mutants: " << mutants);
  CHECK(mutants > 0);
}

}  // namespace

TEST_CASE("the library's loaders refuse damaged model files and checkpoints cleanly (fixed count)",
          "[io][fuzz]") {
  fuzz(1e9, 600, 20261202);
}

TEST_CASE("the library's loaders survive GYRE_FUZZ_SECONDS of damaged files", "[io][fuzz][slow]") {
  const char* env = std::getenv("GYRE_FUZZ_SECONDS");
  const double seconds = env ? std::atof(env) : 60.0;
  const auto seed = static_cast<std::uint64_t>(std::chrono::system_clock::now().time_since_epoch().count());
  fuzz(seconds, ~std::size_t{0}, seed);
}

TEST_CASE("train --resume refuses a damaged trainer state in resume.bin cleanly", "[io][fuzz]") {
  const fs::path dir = work_dir() / "resume";
  fs::remove_all(dir);
  fs::create_directories(dir);
  gyre::train::TrainConfig c;
  c.train = (dir / "train.tsv").string();
  gyre::test::write_learnable_corpus(c.train, 120, 5);
  c.embedding_size = 4;
  c.hidden_size = 4;
  c.batch_size = 16;
  c.epochs = 2;
  c.patience = 0;
  gyre::train::TrainOptions o;
  o.quiet = true;
  o.out = dir / "pristine";
  o.interrupt_after_epochs = 1;
  gyre::train::train(c, o);
  const Bytes pristine = read_bytes(o.out / "resume.bin");
  const auto file = gyre::runtime::ModelFile::from_bytes(pristine, "pristine");
  const json header = json::parse(file.header_json());

  gyre::Rng rng(77);
  for (int i = 0; i < 60; ++i) {
    // A trainer or config member of the header replaced (the weights are what the loader test
    // above covers).
    json h = header;
    const char* part = rng.below(2) == 0 ? "trainer" : "config";
    std::vector<json::json_pointer> all;
    pointers(h[part], json::json_pointer("/" + std::string(part)), all);
    if (all.size() < 2) continue;
    const std::string where = all[1 + rng.below(all.size() - 1)].to_string();  // not the member itself
    h[json::json_pointer(where)] = extreme_value(rng);
    gyre::runtime::ModelFileWriter writer(h.dump());
    for (const auto& t : file.tensors()) writer.add_tensor(t.name, t.shape, file.read_f32(t), t.dtype);
    const fs::path run = dir / "run";
    fs::remove_all(run);
    fs::copy(o.out, run, fs::copy_options::recursive);
    writer.write((run / "resume.bin").string());
    gyre::train::TrainOptions r;
    r.quiet = true;
    r.out = run;
    INFO("mutant " << i << ": " << where);
    try {
      gyre::train::resume(r);
    } catch (const gyre::Error&) {
    } catch (const std::exception& e) {
      FAIL_CHECK("escaped as " << typeid(e).name() << ": " << e.what());
    }
  }
}
