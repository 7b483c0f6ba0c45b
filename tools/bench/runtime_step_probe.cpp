// Runs N recurrent steps of a random single-layer LSTM classifier (embedding 64, hidden 64,
// 1000 words, 3 labels; weights f32 or int8) through runtime::Context::push_id, for counting
// executed instructions per token under qemu (tools/bench/count_insns_qemu.sh): the difference
// between two runs with different N is the cost of N2 - N1 steps, start-up cancels out.
// Usage: runtime_step_probe f32|i8 STEPS
#include <cstdio>
#include <cstdlib>
#include <string>

#include "gyre/runtime/model.hpp"
#include "runtime/model_builder.hpp"

int main(int argc, char** argv) {
  if (argc != 3) {
    std::fprintf(stderr, "usage: %s f32|i8 STEPS\n", argv[0]);
    return 2;
  }
  const std::string dtype = argv[1];
  if (dtype != "f32" && dtype != "i8") {
    std::fprintf(stderr, "%s: dtype must be f32 or i8, not '%s'\n", argv[0], argv[1]);
    return 2;
  }
  const long steps = std::strtol(argv[2], nullptr, 10);
  gyre::test::RefModel ref;
  ref.E = 64;
  ref.H = 64;
  ref.V = 1000;
  ref.randomize(7);
  const auto bytes = ref.file(dtype == "f32" ? gyre::runtime::DType::kF32 : gyre::runtime::DType::kI8);
  const auto model = gyre::runtime::Model::from_buffer(bytes.data(), bytes.size());
  gyre::runtime::Context ctx(model);
  ctx.reset();
  float sum = 0.0f;
  for (long i = 0; i < steps; ++i) sum += ctx.push_id(static_cast<std::uint32_t>(2 + i % 997))[0];
  std::printf("%s kernels=%s steps=%ld checksum=%.6f\n", dtype.c_str(), gyre::runtime::Model::kernel_name(),
              steps, static_cast<double>(sum));
  return 0;
}
