#pragma once
// The AVX2+FMA variants of the training kernels (fast_kernels.hpp), for x86-64 CPUs without
// AVX-512 (most laptops and desktops, and AMD server parts before Zen 4). Same operands, the same
// packed B panels (kGemmNr columns), the same summation order (k in blocks of kGemmKc, one FMA
// chain per output from zero in each block) and the same activation formulas: only the vector
// width (8 floats) and the register tiles differ, and U for the fused steps is packed in 8-unit
// sub-panels (fast::pack_gates). Called through fast_kernels.cpp's dispatch only, when
// gyre::training_kernels() is kAvx2; on other architectures this file compiles to nothing.

#include <cstddef>

namespace gyre::nn::detail::fast::avx2 {

void gemm_packed(std::ptrdiff_t m, std::ptrdiff_t n, std::ptrdiff_t k, const float* a, std::ptrdiff_t lda,
                 bool trans_a, const float* bp, float* c, std::ptrdiff_t ldc, bool accumulate,
                 const float* bias);
void lstm_step(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* h_prev, const float* c_prev,
               std::ptrdiff_t ld_state, const float* up, float* gates, float* c_out, float* tanh_c_out,
               float* h_out);
void gru_step(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* h_prev, std::ptrdiff_t ld_state,
              const float* up, const float* bias_hidden, float* gates, float* hn_out, float* h_out);
void lstm_cell_backward(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* d_out, std::ptrdiff_t ld_out,
                        const int* source, const float* dh, float* dc, const float* acts, const float* tanh_c,
                        const float* c_prev, float* dgates);
void gru_cell_backward(std::ptrdiff_t n, std::ptrdiff_t hidden, const float* d_out, std::ptrdiff_t ld_out,
                       const int* source, float* dh, const float* acts, const float* hn, const float* h_prev,
                       float* dgi, float* dgh);
void add_column_sums(const float* a, std::ptrdiff_t rows, std::ptrdiff_t cols, std::ptrdiff_t lda,
                     float* out);
/// fast::pack_gates_panels in the AVX2 layout (kAvx2CellUnits sub-panels).
void pack_gates_panels(const float* u, int gates, std::ptrdiff_t hidden, float* out, std::ptrdiff_t p_begin,
                       std::ptrdiff_t p_end);
/// fast::pack_b of an operand stored transposed, when n is whole panels and k a multiple of 8;
/// false (nothing written) otherwise.
bool pack_b_transposed(const float* b, std::ptrdiff_t ldb, std::ptrdiff_t k, std::ptrdiff_t n, float* out);

}  // namespace gyre::nn::detail::fast::avx2
