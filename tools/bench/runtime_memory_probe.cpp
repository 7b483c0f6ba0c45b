// Memory the runtime needs beyond the model file it maps: writes a random model of the demo's size
// (LSTM, embedding 64, hidden 128, 2214 words, 8 labels: README's training example) as f32 and as
// int8 into DIR, then for each measures around Model::load and around the first Context + classify:
//   heap bytes in use (glibc mallinfo2: uordblks + hblkhd), and
//   anonymous resident bytes (/proc/self/statm: resident - shared, i.e. not backed by a file).
// A second Context gives the per-Context cost. Words tokenizer with NFKC + case folding when the
// runtime has ICU (as the demo models), else whitespace. Used by tools/footprint.sh.
// Usage: runtime_memory_probe DIR
#include <malloc.h>
#include <unistd.h>

#include <cstdio>
#include <fstream>
#include <string>

#include "gyre/runtime/model.hpp"
#include "gyre/runtime/tokenizer.hpp"
#include "runtime/model_builder.hpp"

namespace {
long heap_bytes() {
  const struct mallinfo2 m = mallinfo2();
  return static_cast<long>(m.uordblks + m.hblkhd);
}
long anon_resident_bytes() {
  std::ifstream in("/proc/self/statm");
  long size = 0, resident = 0, shared = 0;
  in >> size >> resident >> shared;
  return (resident - shared) * sysconf(_SC_PAGESIZE);
}
}  // namespace

int main(int argc, char** argv) {
  if (argc != 2) {
    std::fprintf(stderr, "usage: %s DIR\n", argv[0]);
    return 2;
  }
  using gyre::runtime::DType;
  gyre::test::RefModel ref;
  ref.E = 64;
  ref.H = 128;
  ref.V = 2214;
  ref.labels = {"l0", "l1", "l2", "l3", "l4", "l5", "l6", "l7"};
  if (gyre::runtime::tokenizer_has_icu()) {
    ref.tokenizer_mode = "words";
    ref.normalize = true;
  }
  ref.randomize(11);
  std::string text;
  for (int i = 0; i < 40; ++i) text += "w" + std::to_string(2 + i * 37 % 2200) + " ";
  for (const DType dtype : {DType::kF32, DType::kI8}) {
    const char* name = dtype == DType::kF32 ? "f32" : "int8";
    const std::string path = std::string(argv[1]) + "/memory_probe_" + name + ".gyre";
    {
      const auto bytes = ref.file(dtype);
      std::ofstream(path, std::ios::binary)
          .write(reinterpret_cast<const char*>(bytes.data()), static_cast<std::streamsize>(bytes.size()));
    }
    const long h0 = heap_bytes(), r0 = anon_resident_bytes();
    {
      const auto model = gyre::runtime::Model::load(path);
      const long h1 = heap_bytes(), r1 = anon_resident_bytes();
      gyre::runtime::Context ctx(model);
      const auto best = ctx.classify(text).best;
      const long h2 = heap_bytes();
      gyre::runtime::Context ctx2(model);
      const auto best2 = ctx2.classify(text).best;
      const long h3 = heap_bytes();
      std::printf(
          "{\"weights\": \"%s\", \"kernels\": \"%s\", \"file_bytes\": %ld, \"load_heap_bytes\": %ld, "
          "\"load_anon_resident_bytes\": %ld, \"context_heap_bytes\": %ld, \"same_answer\": %s}\n",
          name, gyre::runtime::Model::kernel_name(), static_cast<long>(model.file().file_size()), h1 - h0,
          r1 - r0, h3 - h2, best == best2 ? "true" : "false");
    }
    std::remove(path.c_str());
  }
  return 0;
}
