// libFuzzer target for the model loader (container + model header + a short inference).
// Each input is tried twice: as is (exercising the size/magic/version/CRC checks) and with its
// CRC-32C trailer recomputed, so that mutations reach the structural checks behind the checksum.
// Build and run: tests/fuzz/run_fuzz.sh (clang, -fsanitize=fuzzer,address,undefined).

#include <cstddef>
#include <cstdint>
#include <cstring>
#include <vector>

#include "gyre/runtime/model.hpp"
#include "runtime/detail/checksum.hpp"

namespace {

void try_load(const std::vector<unsigned char>& bytes) {
  using namespace gyre::runtime;
  try {
    const Model model = Model::from_buffer(bytes.data(), bytes.size(), "fuzz");
    Context ctx(model);
    const std::uint32_t ids[3] = {2 % static_cast<std::uint32_t>(model.vocabulary_size()), 1, 0};
    if (model.architecture().task == Task::kClassify) {
      // A model with an n-gram part needs the words (its id-only calls refuse); text reaches it.
      if (!model.architecture().has_ngram_part()) ctx.classify_ids(gyre::Span<const std::uint32_t>(ids, 3));
      ctx.classify("w2 w3 w2");
    } else {
      ctx.tag_ids(gyre::Span<const std::uint32_t>(ids, 3));
    }
    if (!model.architecture().bidirectional) ctx.push("w2");
  } catch (const Error&) {
    // A clear refusal is the expected outcome for most inputs.
  }
}

}  // namespace

extern "C" int LLVMFuzzerTestOneInput(const std::uint8_t* data, std::size_t size) {
  std::vector<unsigned char> bytes(data, data + size);  // operator new: suitably aligned
  try_load(bytes);
  if (bytes.size() >= 72) {
    const std::uint32_t crc = gyre::runtime::detail::crc32c(bytes.data(), bytes.size() - 8);
    for (int i = 0; i < 4; ++i)
      bytes[bytes.size() - 8 + static_cast<std::size_t>(i)] = static_cast<unsigned char>(crc >> (8 * i));
    try_load(bytes);
  }
  return 0;
}
