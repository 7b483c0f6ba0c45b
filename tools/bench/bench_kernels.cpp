// The products of one recurrent layer's training step, timed one by one: gyre's GEMM
// (src/nn/detail/gemm.hpp, which takes the AVX-512 or AVX2 kernels when the CPU has them) at the shapes
// of bench_rnn's workloads, and the fused cell steps. Run it twice to compare the kernels with
// the portable (Eigen) path:
//
//   bench_kernels [--hidden 256] [--embed 128] [--batch 32] [--tokens 1150] [--seconds 0.5]
//   GYRE_NN_KERNELS=portable bench_kernels ...
//
// Prints one line per product: shape, GFLOP/s per CPU second (process CPU time, so other
// processes' load does not lower it; it cannot remove cache sharing).

#include <algorithm>
#include <cstdio>
#include <cstdlib>
#include <ctime>
#include <functional>
#include <string>

#include "gyre/core/rng.hpp"
#include "nn/detail/fast_kernels.hpp"
#include "nn/detail/gemm.hpp"

namespace {

using gyre::nn::Matrix;
using gyre::nn::detail::Gemm;
using gyre::nn::detail::Op;
namespace fast = gyre::nn::detail::fast;

double cpu_seconds() {
  timespec ts{};
  clock_gettime(CLOCK_PROCESS_CPUTIME_ID, &ts);
  return static_cast<double>(ts.tv_sec) + 1e-9 * static_cast<double>(ts.tv_nsec);
}

Matrix random_matrix(Eigen::Index rows, Eigen::Index cols, gyre::Rng& rng) {
  Matrix m(rows, cols);
  for (Eigen::Index i = 0; i < m.size(); ++i) m.data()[i] = rng.uniform(-0.5f, 0.5f);
  return m;
}

void report(const std::string& what, double flops, double seconds, const std::function<void()>& fn) {
  fn();  // warm-up
  long reps = 0;
  const double t0 = cpu_seconds();
  double t = 0;
  do {
    fn();
    ++reps;
    t = cpu_seconds() - t0;
  } while (t < seconds);
  std::printf("%-44s %9.1f GFLOP/s  (%ld reps, %.1f us each)\n", what.c_str(),
              flops * static_cast<double>(reps) / t * 1e-9, reps, t / static_cast<double>(reps) * 1e6);
}

}  // namespace

int main(int argc, char** argv) {
  int H = 256, E = 128, B = 32, N = 1150;
  double seconds = 0.5;
  for (int i = 1; i + 1 < argc; i += 2) {
    const std::string a = argv[i];
    const int v = std::atoi(argv[i + 1]);
    if (a == "--hidden")
      H = v;
    else if (a == "--embed")
      E = v;
    else if (a == "--batch")
      B = v;
    else if (a == "--tokens")
      N = v;
    else if (a == "--seconds")
      seconds = std::atof(argv[i + 1]);
    else {
      std::fprintf(stderr, "bench_kernels: unknown option %s\n", a.c_str());
      return 2;
    }
  }
  std::printf("kernels: %s; H %d, E %d, batch %d, tokens %d\n", fast::name(), H, E, B, N);
  gyre::Rng rng(1);
  for (const int G : {4, 3}) {
    const char* cell = G == 4 ? "lstm" : "gru";
    const Matrix W = random_matrix(G * H, E, rng), U = random_matrix(G * H, H, rng);
    const Matrix X = random_matrix(N, E, rng), Hs = random_matrix(N, H, rng),
                 dG = random_matrix(N, G * H, rng);
    const Matrix hb = random_matrix(B, H, rng), dgb = random_matrix(B, G * H, rng);
    Matrix gates(N, G * H), dX(N, E), dW(G * H, E), dU(G * H, H), step(B, G * H), dh(B, H);
    Gemm gemm;
    const double g = G, h = H, e = E, b = B, n = N;
    report(std::string(cell) + " input  X W^T   [N x GH x E]", 2 * n * g * h * e, seconds,
           [&] { gemm.run(gates, X, Op::kN, W, Op::kT, false); });
    report(std::string(cell) + " step   h U^T   [B x GH x H] (packs U)", 2 * b * g * h * h, seconds,
           [&] { gemm.run(step, hb, Op::kN, U, Op::kT, true); });
    report(std::string(cell) + " back   dG U    [B x H x GH] (packs U)", 2 * b * g * h * h, seconds,
           [&] { gemm.run(dh, dgb, Op::kN, U, Op::kN, false); });
    report(std::string(cell) + " dW_in  dG^T X  [GH x E x N]", 2 * n * g * h * e, seconds,
           [&] { gemm.run(dW, dG, Op::kT, X, Op::kN, true); });
    report(std::string(cell) + " dW_h   dG^T h  [GH x H x N]", 2 * n * g * h * h, seconds,
           [&] { gemm.run(dU, dG, Op::kT, Hs, Op::kN, true); });
    report(std::string(cell) + " dX     dG W    [N x E x GH]", 2 * n * g * h * e, seconds,
           [&] { gemm.run(dX, dG, Op::kN, W, Op::kN, false); });
    if (fast::available() && H % fast::kCellUnits == 0) {
      fast::AlignedBuffer up, ub;
      fast::pack_gates(U.data(), G, H, up.reserve(fast::packed_size(H, G * H, G * fast::kCellUnits)));
      fast::pack_b(U.data(), H, false, G * H, H, ub.reserve(fast::packed_size(G * H, H)));
      report(std::string(cell) + " back   dG U    prepacked", 2 * b * g * h * h, seconds, [&] {
        fast::gemm_packed(B, H, G * H, dgb.data(), G * H, false, ub.data(), dh.data(), H, false, nullptr);
      });
      Matrix c(B, H), tc(B, H), hn(B, H), hout(B, H), cprev = random_matrix(B, H, rng);
      Matrix xg = random_matrix(B, G * H, rng), bh = random_matrix(1, G * H, rng);
      report(std::string(cell) + " fused step (GEMM + cell)", 2 * b * g * h * h, seconds, [&] {
        step = xg;
        if (G == 4)
          fast::lstm_step(B, H, hb.data(), cprev.data(), H, up.data(), step.data(), c.data(), tc.data(),
                          hout.data());
        else
          fast::gru_step(B, H, hb.data(), H, up.data(), bh.data(), step.data(), hn.data(), hout.data());
      });
    }
  }
  return 0;
}
