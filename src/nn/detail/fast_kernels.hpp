#pragma once
// Training kernels for x86-64 CPUs with AVX-512 (F, DQ, BW, VL; fast_kernels.cpp) or with AVX2 and
// FMA (fast_kernels_avx2.cpp), compiled with target attributes and chosen at run time
// (gyre::training_kernels(); no -march flag needed): a register-blocked single-precision GEMM on
// packed right-hand panels, and the LSTM/GRU time step with the gate non-linearities fused into
// the GEMM's epilogue. On other CPUs `available()` is false and the layers use their Eigen path
// (the portable path), which computes the same functions.
//
// Determinism: every product sums its k terms in blocks of kGemmKc, in order, each block from
// zero with one FMA chain per output, then adds the block to the output. Nothing depends on the
// history of calls or on buffer sizes, only on (m, n, k) and the operands, so a repeated product
// gives the same bits (a resumed run equals an uninterrupted one). Results differ in the last
// bits from the portable path; one machine always takes the same path.
//
// Packed panel layout ("packed B"): a [k x n] operand is stored as ceil(n / NR) panels, panel p
// holding columns [p*NR, p*NR + NR) as k consecutive rows of NR floats ([p][k][NR]); columns
// past n are zero. The fused cell kernels use the same layout with the columns permuted so that
// one panel holds all gates of a group of hidden units (see pack_gates).

#include <cstddef>
#include <cstdint>
#include <memory>

namespace gyre::nn::detail::fast {

/// Columns per panel of the general GEMM.
inline constexpr int kGemmNr = 32;
/// k-block size (part of the summation order: never derived from anything but this constant).
inline constexpr int kGemmKc = 256;
/// Rows of A per cache block in the general GEMM.
inline constexpr int kGemmMc = 144;
/// Hidden units per panel of the fused cell kernels (LSTM: 4 gates x 16, GRU: 3 gates x 16).
inline constexpr int kCellUnits = 16;
/// Units per sub-panel of the AVX2 kernels' gate packing (see pack_gates).
inline constexpr int kAvx2CellUnits = 8;

/// True when the AVX-512 or the AVX2 kernels are used on this CPU (gyre::training_kernels():
/// GYRE_NN_KERNELS=portable in the environment turns them off, =avx2 keeps to the AVX2 ones).
bool available() noexcept;
/// "avx512", "avx2" or "portable".
const char* name() noexcept;

/// Floats of a packed [k x n] operand with `nr` columns per panel.
inline std::size_t packed_size(std::ptrdiff_t k, std::ptrdiff_t n, int nr = kGemmNr) {
  return static_cast<std::size_t>((n + nr - 1) / nr * nr) * static_cast<std::size_t>(k);
}

/// Packs op(B) [k x n] into panels of kGemmNr columns. trans = false: B is [k x n] row-major with
/// row stride ldb; trans = true: B is stored as its transpose [n x k] with row stride ldb.
void pack_b(const float* b, std::ptrdiff_t ldb, bool trans, std::ptrdiff_t k, std::ptrdiff_t n, float* out);

/// Panels [panel_begin, panel_end) of pack_b's output only (the rest of `out` untouched), so that
/// several threads can pack one operand together.
void pack_b_panels(const float* b, std::ptrdiff_t ldb, bool trans, std::ptrdiff_t k, std::ptrdiff_t n,
                   float* out, std::ptrdiff_t panel_begin, std::ptrdiff_t panel_end);
/// Panels of pack_b's output: ceil(n / kGemmNr).
inline std::ptrdiff_t b_panels(std::ptrdiff_t n) {
  return (n + kGemmNr - 1) / kGemmNr;
}

/// Packs the recurrent weight U [G*H x H] (row-major, gate blocks of H rows) read transposed, as
/// the [H x G*H] right operand of h U^T, with the columns of kCellUnits units of every gate in one
/// panel: panel p, column g*16 + j = gate g, unit 16p + j. H must be a multiple of kCellUnits.
/// With the AVX2 kernels each panel is instead two sub-panels of kAvx2CellUnits units, one after
/// the other ([2][H][G*8]: sub-panel s, column g*8 + j = gate g, unit 16p + 8s + j): the same
/// floats in the same panel's storage, ordered so that each k of a sub-panel is whole lines.
void pack_gates(const float* u, int gates, std::ptrdiff_t hidden, float* out);
/// Panels [panel_begin, panel_end) of pack_gates's output only (it has hidden / kCellUnits).
void pack_gates_panels(const float* u, int gates, std::ptrdiff_t hidden, float* out,
                       std::ptrdiff_t panel_begin, std::ptrdiff_t panel_end);

/// C[m x n] = A B (or C += A B when accumulate). A: [m x k] row-major, row stride lda (or, with
/// trans_a, stored as its transpose [k x m] with row stride lda). bp: op(B) packed by pack_b.
/// work: at least work_size(m, k, trans_a) floats, 64-byte aligned (used for a transposed A).
/// bias [n], when given, is added to every row of the result in the epilogue of the last k block
/// (the bits of adding it to C afterwards, without another pass over C).
void gemm_packed(std::ptrdiff_t m, std::ptrdiff_t n, std::ptrdiff_t k, const float* a, std::ptrdiff_t lda,
                 bool trans_a, const float* bp, float* c, std::ptrdiff_t ldc, bool accumulate, float* work,
                 const float* bias = nullptr);
inline std::size_t work_size(bool trans_a) {
  return trans_a ? static_cast<std::size_t>(kGemmMc) * kGemmKc : 0;
}

/// One LSTM time step for n sequences (rows), all row-major with the given strides:
/// gates [n x 4H] holds W x + b on entry and the activations i f g o on return;
/// h_prev, c_prev [n x H] (row stride ld_state); c_out, tanh_c_out, h_out [n x H] (row stride H).
/// up: U packed by pack_gates(U, 4, H). Computes gates += h_prev U^T, then the cell equations of
/// include/gyre/nn/lstm_layer.hpp.
void lstm_step(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* h_prev, const float* c_prev,
               std::ptrdiff_t ld_state, const float* up, float* gates, float* c_out, float* tanh_c_out,
               float* h_out);

/// One GRU time step ("reset after", include/gyre/nn/gru_layer.hpp) for n rows:
/// gates [n x 3H] holds W x + b_i on entry and the activations r z n on return; hn_out [n x H]
/// receives U[h~] h + b_hidden[h~]; h_out [n x H] the new state. up: U packed by pack_gates(U, 3, H);
/// bias_hidden [3H]. h_prev has row stride ld_state, the others their natural width.
void gru_step(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* h_prev, std::ptrdiff_t ld_state,
              const float* up, const float* bias_hidden, float* gates, float* hn_out, float* h_out);

/// LSTM backward, element-wise part of one step for n rows (Hochreiter & Schmidhuber 1997 with the
/// forget gate of Gers et al. 2000; derivatives of the equations in include/gyre/nn/lstm_layer.hpp).
/// On entry dh [n x H] holds the gradient reaching h from the next step; when d_out is not null,
/// row j of d_out (row stride ld_out) at index source[j] is added to it first. dc [n x H] is the
/// running cell gradient. acts [n x 4H] (i f g o), tanh_c and c_prev [n x H] are the forward's
/// caches. Writes dgates [n x 4H] (d loss / d pre-activations) and dc *= f (the gradient reaching
/// the previous cell); dh is left as read (the caller overwrites it with dgates U).
///   dc += dh o (1 - tanh_c^2); d_i = dc g i (1 - i); d_f = dc c_prev f (1 - f);
///   d_g = dc i (1 - g^2); d_o = dh tanh_c o (1 - o).
void lstm_cell_backward(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* d_out, std::ptrdiff_t ld_out,
                        const int* source, const float* dh, float* dc, const float* acts, const float* tanh_c,
                        const float* c_prev, float* dgates);

/// GRU backward ("reset after", include/gyre/nn/gru_layer.hpp), element-wise part of one step for
/// n rows. dh [n x H] as for lstm_cell_backward (d_out rows added first when d_out is not null);
/// acts [n x 3H] (r z n), hn [n x H] (U[h~] h + b_hidden[h~]), h_prev [n x H]. Writes
/// dgi [n x 3H] (input side: d_r d_z d_n), dgh [n x 3H] (hidden side: d_r d_z d_n r) and
/// dh = dh z (the direct path; the caller adds dgh U):
///   d_n = dh (1 - z)(1 - n^2); d_r = d_n hn r (1 - r); d_z = dh (h_prev - n) z (1 - z).
void gru_cell_backward(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* d_out, std::ptrdiff_t ld_out,
                       const int* source, float* dh, const float* acts, const float* hn, const float* h_prev,
                       float* dgi, float* dgh);

/// out[c] += sum of column c of the [rows x cols] row-major a (row stride lda), each column summed
/// from row 0 down in order: the same bits as detail::add_column_sums (buffer.hpp), 16 columns a
/// vector. Used for the bias gradients.
void add_column_sums(const float* a, std::ptrdiff_t rows, std::ptrdiff_t cols, std::ptrdiff_t lda,
                     float* out);

/// 64-byte aligned grow-only float storage for packed operands (contents unspecified after growth).
class AlignedBuffer {
 public:
  /// At least n floats, exactly n when it grows (fixed sizes: the weight packs).
  float* reserve(std::size_t n);
  /// At least n floats; a growth frees the old block first and takes half as much again as asked,
  /// like nn::grow_storage. For operands whose size follows the batch's token count (Gemm's packed
  /// B of the weight-gradient products): a slice a little longer than any before then reuses the
  /// block instead of allocating a new one and faulting in all its pages (issue 13).
  float* grow(std::size_t n);
  float* data() const noexcept { return data_.get(); }
  std::size_t capacity_bytes() const noexcept { return size_ * sizeof(float); }

 private:
  struct Free {
    void operator()(float* p) const noexcept;
  };
  std::unique_ptr<float, Free> data_;
  std::size_t size_ = 0;
};

}  // namespace gyre::nn::detail::fast
