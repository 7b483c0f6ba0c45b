#include "gyre/nn/lstm_layer.hpp"

#include <string>

#include "detail/buffer.hpp"
#include "detail/fast_kernels.hpp"
#include "detail/gemm.hpp"
#include "detail/sequence_layout.hpp"
#include "detail/weight_packs.hpp"
#include "gyre/core/error.hpp"
#include "gyre/nn/init.hpp"

namespace gyre::nn {

// Caches for backward, all in packed rows (detail/sequence_layout.hpp): N = sum of lengths, the
// rows of processing step s are the block [offset(s), offset(s) + count(s)).
struct LstmLayer::Workspace {
  detail::SequenceLayout layout;
  bool ready = false;  // a forward has run
  // One GEMM object per call site: each keeps its packing buffers (see detail/gemm.hpp).
  detail::Gemm gemm_input, gemm_step, gemm_back, gemm_dw_input, gemm_dw_hidden, gemm_dx;
  detail::GrowBuffer x;       // [N x D]: the packed input (kept for the weight gradient)
  detail::GrowBuffer gates;   // [N x 4H]: pre-activations, then activations i f g o in place
  detail::GrowBuffer h;       // [N x H]: hidden state after the step
  detail::GrowBuffer c;       // [N x H]: cell state after the step
  detail::GrowBuffer tanh_c;  // [N x H]: tanh(c)
  detail::GrowBuffer h_prev;  // [N x H]: hidden state before the step (for the dW_hidden product)
  detail::GrowBuffer h0, c0;  // [B x H]: initial state in sorted order
  detail::GrowBuffer dh, dc;  // [B x H]: running state gradients in sorted order (backward)
  detail::GrowBuffer dgates;  // [N x 4H]: d loss / d pre-activations
  detail::GrowBuffer dx;      // [N x D]: packed input gradient
  // Fast-kernel path (AVX-512 or AVX2): U packed once per forward (gate-interleaved for the fused step) and
  // once per backward (panels of U for dG U), reused by every time step; W packed by the GEMM objects.
  // pack_weights() fills all four packs here instead, and `packs.shared` (when set) points at the packs
  // forward and backward read: this layer's or another replica's (read_packs_from).
  detail::LayerPacks packs;
};

LstmLayer::LstmLayer(ParameterStore& store, const std::string& prefix, int input_size, int hidden_size,
                     bool reverse)
    : input_size_(input_size),
      hidden_size_(hidden_size),
      reverse_(reverse),
      w_input_(store.add(prefix + ".w_input", 4 * static_cast<Eigen::Index>(hidden_size), input_size)),
      w_hidden_(store.add(prefix + ".w_hidden", 4 * static_cast<Eigen::Index>(hidden_size), hidden_size)),
      bias_(store.add(prefix + ".b_input", 1, 4 * static_cast<Eigen::Index>(hidden_size))),
      ws_(std::make_unique<Workspace>()) {}

LstmLayer::~LstmLayer() = default;

void LstmLayer::init_parameters(Rng& rng) {
  glorot_uniform(w_input_.value, rng);
  orthogonal_blocks(w_hidden_.value, 4, rng);
  bias_.value.setZero();
  // Forget-gate bias 1 (Gers et al. 2000 suggest a positive bias; Jozefowicz et al. 2015 use 1).
  bias_.value.middleCols(hidden_size_, hidden_size_).setConstant(1.0f);
}

std::size_t LstmLayer::workspace_capacity() const noexcept {
  const Workspace& w = *ws_;
  return w.x.capacity_bytes() + w.gates.capacity_bytes() + w.h.capacity_bytes() + w.c.capacity_bytes() +
         w.tanh_c.capacity_bytes() + w.h_prev.capacity_bytes() + w.h0.capacity_bytes() +
         w.c0.capacity_bytes() + w.dh.capacity_bytes() + w.dc.capacity_bytes() + w.dgates.capacity_bytes() +
         w.dx.capacity_bytes() + w.packs.capacity_bytes();
}

void LstmLayer::reserve_packs() {
  ws_->packs.reserve(4, hidden_size_, input_size_);
}

void LstmLayer::pack_weights(int part, int parts) {
  ws_->packs.pack(w_hidden_.value.data(), w_input_.value.data(), 4, hidden_size_, input_size_, part, parts);
}

void LstmLayer::read_packs_from(const RecurrentLayer* source) {
  ws_->packs.shared =
      source == nullptr
          ? nullptr
          : &detail::same_layer(
                 *source, *this,
                 "LstmLayer::read_packs_from: the source is not an LSTM layer of the same shape")
                 .ws_->packs.own;
}

namespace {

// The state after each sequence's last valid step (the initial state for an empty sequence), in
// input order: `initial` [B x H] in sorted order, `states` [N x H] in packed rows (see
// detail/sequence_layout.hpp). Nothing when `out_state` is null.
void final_state(const detail::SequenceLayout& lay, const MatrixMap& initial, const MatrixMap& states,
                 MatrixBuffer* out_state) {
  if (out_state == nullptr) return;
  const Eigen::Index B = initial.rows(), H = initial.cols();
  MatrixMap out = out_state->shape(B, H);
  for (int j = 0; j < B; ++j) {
    const int b = lay.sequence(j), len = lay.length(j);
    if (len == 0)
      out.row(b) = initial.row(j);
    else
      out.row(b) = states.row(lay.offset(len - 1) + j);
  }
}

}  // namespace

void LstmLayer::forward(Eigen::Ref<const Matrix> x, int T, std::span<const int> lengths,
                        Eigen::Ref<Matrix> out, const MatrixBuffer* h0, const MatrixBuffer* c0,
                        MatrixBuffer* h_final, MatrixBuffer* c_final) {
  const Eigen::Index B = detail::check_batch("LstmLayer::forward", x.rows(), T, lengths, 0);
  const Eigen::Index H = hidden_size_, D = input_size_;
  GYRE_CHECK(x.cols() == D, "LstmLayer::forward: input has " + std::to_string(x.cols()) +
                                " columns, layer expects " + std::to_string(D));
  GYRE_CHECK(out.rows() == x.rows() && out.cols() == H,
             "LstmLayer::forward: output must be [T*B x hidden_size]");
  GYRE_CHECK(h0 == nullptr || (h0->rows() == B && h0->cols() == H), "LstmLayer::forward: h0 must be [B x H]");
  GYRE_CHECK(c0 == nullptr || (c0->rows() == B && c0->cols() == H), "LstmLayer::forward: c0 must be [B x H]");
  Workspace& w = *ws_;
  detail::SequenceLayout& lay = w.layout;
  lay.build(lengths, T, reverse_);
  w.ready = true;
  const Eigen::Index N = lay.rows();

  MatrixMap xs = w.x.view(N, D);
  MatrixMap gates = w.gates.view(N, 4 * H);
  MatrixMap hs = w.h.view(N, H), cs = w.c.view(N, H), tanh_c = w.tanh_c.view(N, H);
  MatrixMap h_prev = w.h_prev.view(N, H);
  MatrixMap hi = w.h0.view(B, H), ci = w.c0.view(B, H);

  for (Eigen::Index p = 0; p < N; ++p) detail::copy_floats(xs.row(p).data(), x.row(lay.source(p)).data(), D);
  for (int j = 0; j < B; ++j) {
    const int b = lay.sequence(j);
    if (h0 != nullptr)
      hi.row(j) = h0->view().row(b);
    else
      hi.row(j).setZero();
    if (c0 != nullptr)
      ci.row(j) = c0->view().row(b);
    else
      ci.row(j).setZero();
  }
  // Packs made for this step by pack_weights (fast-kernel path only), or null: pack here.
  const detail::WeightPacks* shared = w.packs.made();
  // Input projection of all valid steps in one GEMM, bias folded in.
  if (shared != nullptr)
    detail::fast::gemm_packed(N, 4 * H, D, xs.data(), xs.outerStride(), false, shared->in_fwd.data(),
                              gates.data(), gates.outerStride(), false, nullptr, bias_.value.data());
  else
    w.gemm_input.run(gates, xs, detail::Op::kN, w_input_.value, detail::Op::kT, false, bias_.value.data());

  const Matrix& U = w_hidden_.value;
  // Fused step (fast kernels) (GEMM + cell in one pass over the gates) when H allows it.
  const float* u_step = w.packs.step(U.data(), 4, H);  // null: no fused step
  for (int s = 0; s < T; ++s) {
    const Eigen::Index n = lay.count(s), o = lay.offset(s);
    if (n == 0) break;  // sorted by length: no later step has work either
    // The cell state before the step is read where it is: the first n rows of the previous
    // step's block (or of the initial state); the hidden state is copied, the dW_hidden product
    // reads it as one [N x H] operand.
    const float* c_before = s == 0 ? ci.data() : cs.row(lay.offset(s - 1)).data();
    if (s == 0)
      detail::copy_floats(h_prev.row(o).data(), hi.data(), n * H);
    else
      detail::copy_floats(h_prev.row(o).data(), hs.row(lay.offset(s - 1)).data(), n * H);
    if (u_step != nullptr) {
      detail::fast::lstm_step(n, H, h_prev.row(o).data(), c_before, H, u_step, gates.row(o).data(),
                              cs.row(o).data(), tanh_c.row(o).data(), hs.row(o).data());
      continue;
    }
    const Eigen::Map<const Matrix> c_prev(c_before, n, H);
    auto g = gates.middleRows(o, n);
    // One fused gate GEMM over the running sequences: gates += h_prev U^T.
    w.gemm_step.run(g, h_prev.middleRows(o, n), detail::Op::kN, U, detail::Op::kT, true);
    g.leftCols(2 * H) = g.leftCols(2 * H).array().logistic().matrix();        // i, f
    g.middleCols(2 * H, H) = g.middleCols(2 * H, H).array().tanh().matrix();  // g
    g.rightCols(H) = g.rightCols(H).array().logistic().matrix();              // o
    auto c_new = cs.middleRows(o, n);
    c_new.array() =
        g.middleCols(H, H).array() * c_prev.array() + g.leftCols(H).array() * g.middleCols(2 * H, H).array();
    tanh_c.middleRows(o, n) = c_new.array().tanh().matrix();
    hs.middleRows(o, n).array() = g.rightCols(H).array() * tanh_c.middleRows(o, n).array();
  }

  lay.zero_padding(out);
  for (Eigen::Index p = 0; p < N; ++p)
    detail::copy_floats(out.row(lay.source(p)).data(), hs.row(p).data(), H);
  final_state(lay, hi, hs, h_final);
  final_state(lay, ci, cs, c_final);
}

void LstmLayer::backward_into(Eigen::Ref<const Matrix> d_out, MatrixMap* d_x, bool accumulate_dx,
                              Matrix* d_h0, Matrix* d_c0) {
  Workspace& w = *ws_;
  GYRE_CHECK(w.ready, "LstmLayer::backward called before forward");
  const detail::SequenceLayout& lay = w.layout;
  const Eigen::Index B = lay.batch(), H = hidden_size_, D = input_size_, TB = lay.steps() * B, N = lay.rows();
  GYRE_CHECK(d_out.rows() == TB && d_out.cols() == H,
             "LstmLayer::backward: d_out must be [T*B x hidden_size]");

  MatrixMap xs = w.x.view(N, D);
  MatrixMap gates = w.gates.view(N, 4 * H);
  MatrixMap tanh_c = w.tanh_c.view(N, H);
  MatrixMap h_prev = w.h_prev.view(N, H), cs = w.c.view(N, H), ci = w.c0.view(B, H);
  MatrixMap dh = w.dh.view(B, H), dc = w.dc.view(B, H);  // running state gradients, sorted order
  MatrixMap dgates = w.dgates.view(N, 4 * H);

  dh.setZero();  // the gradient w.r.t. the final state is zero (window boundary)
  dc.setZero();
  const Matrix& U = w_hidden_.value;
  const bool fast = detail::fast::available();
  const detail::WeightPacks* shared = w.packs.made();
  const float* u_back = w.packs.back(U.data(), 4, H);
  for (int s = lay.steps() - 1; s >= 0; --s) {
    const Eigen::Index n = lay.count(s), o = lay.offset(s);
    if (n == 0) continue;
    const float* c_before = s == 0 ? ci.data() : cs.row(lay.offset(s - 1)).data();  // as in forward
    if (fast) {
      // Element-wise part in one vector pass (d_out rows gathered in it), then dh = dG U.
      detail::fast::lstm_cell_backward(n, H, d_out.data(), d_out.outerStride(), lay.sources(o), dh.data(),
                                       dc.data(), gates.row(o).data(), tanh_c.row(o).data(), c_before,
                                       dgates.row(o).data());
      detail::fast::gemm_packed(n, H, 4 * H, dgates.row(o).data(), 4 * H, false, u_back, dh.data(), H, false,
                                nullptr);
      continue;
    }
    for (Eigen::Index j = 0; j < n; ++j) dh.row(j) += d_out.row(lay.source(o + j));
    const auto a = gates.middleRows(o, n).array();
    const auto i = a.leftCols(H), f = a.middleCols(H, H), g = a.middleCols(2 * H, H), og = a.rightCols(H);
    const auto tc = tanh_c.middleRows(o, n).array();
    auto dH = dh.topRows(n).array();
    auto dC = dc.topRows(n).array();
    dC += dH * og * (1.0f - tc * tc);
    auto dg = dgates.middleRows(o, n).array();
    dg.leftCols(H) = dC * g * i * (1.0f - i);
    dg.middleCols(H, H) = dC * Eigen::Map<const Matrix>(c_before, n, H).array() * f * (1.0f - f);
    dg.middleCols(2 * H, H) = dC * i * (1.0f - g * g);
    dg.rightCols(H) = dH * tc * og * (1.0f - og);
    dC *= f;
    // Sequences not running at step s have had no step yet in this backward sweep: their
    // gradients are still zero and stay so.
    w.gemm_back.run(dh.topRows(n), dgates.middleRows(o, n), detail::Op::kN, U, detail::Op::kN, false);
  }

  w.gemm_dw_input.run(w_input_.grad, dgates, detail::Op::kT, xs, detail::Op::kN, true);
  w.gemm_dw_hidden.run(w_hidden_.grad, dgates, detail::Op::kT, h_prev, detail::Op::kN, true);
  detail::add_column_sums(dgates, bias_.grad.row(0).data());
  if (d_x != nullptr) {
    GYRE_CHECK(d_x->rows() == TB && d_x->cols() == D, "LstmLayer::backward: d_x has the wrong shape");
    MatrixMap dxs = w.dx.view(N, D);
    if (shared != nullptr)
      detail::fast::gemm_packed(N, D, 4 * H, dgates.data(), dgates.outerStride(), false,
                                shared->in_back.data(), dxs.data(), dxs.outerStride(), false, nullptr);
    else
      w.gemm_dx.run(dxs, dgates, detail::Op::kN, w_input_.value, detail::Op::kN, false);
    if (accumulate_dx) {
      for (Eigen::Index p = 0; p < N; ++p) d_x->row(lay.source(p)) += dxs.row(p);
    } else {
      lay.scatter_into_zeros(dxs, *d_x);
    }
  }
  if (d_h0 != nullptr || d_c0 != nullptr) {
    if (d_h0 != nullptr && (d_h0->rows() != B || d_h0->cols() != H)) d_h0->resize(B, H);
    if (d_c0 != nullptr && (d_c0->rows() != B || d_c0->cols() != H)) d_c0->resize(B, H);
    for (int j = 0; j < B; ++j) {
      if (d_h0 != nullptr) d_h0->row(lay.sequence(j)) = dh.row(j);
      if (d_c0 != nullptr) d_c0->row(lay.sequence(j)) = dc.row(j);
    }
  }
}

}  // namespace gyre::nn
