#include "gyre/nn/gru_layer.hpp"

#include <string>

#include "detail/buffer.hpp"
#include "detail/fast_kernels.hpp"
#include "detail/gemm.hpp"
#include "detail/sequence_layout.hpp"
#include "detail/weight_packs.hpp"
#include "gyre/core/error.hpp"
#include "gyre/nn/init.hpp"

namespace gyre::nn {

// Caches in packed rows (see lstm_layer.cpp and detail/sequence_layout.hpp).
struct GruLayer::Workspace {
  detail::SequenceLayout layout;
  bool ready = false;
  detail::Gemm gemm_input, gemm_step, gemm_back, gemm_dw_input, gemm_dw_hidden, gemm_dx;
  detail::GrowBuffer x;       // [N x D]: packed input
  detail::GrowBuffer gates;   // [N x 3H]: W x + b_i, then activations r z n in place
  detail::GrowBuffer hn;      // [N x H]: U[h~] h + b_hidden[h~] (the term r multiplies)
  detail::GrowBuffer h;       // [N x H]: state after the step
  detail::GrowBuffer h_prev;  // [N x H]: state before the step
  detail::GrowBuffer h0;      // [B x H]: initial state (sorted) / running gradient (backward)
  detail::GrowBuffer step;    // [B x 3H]: U h of the current step
  detail::GrowBuffer dgi;     // [N x 3H]: d loss / d input-side pre-activations
  detail::GrowBuffer dgh;     // [N x 3H]: d loss / d hidden-side pre-activations (U h + b_h)
  detail::GrowBuffer dx;      // [N x D]
  detail::LayerPacks packs;   // U and W packed for the fast-kernel path (see lstm_layer.cpp)
};

GruLayer::GruLayer(ParameterStore& store, const std::string& prefix, int input_size, int hidden_size,
                   bool reverse)
    : input_size_(input_size),
      hidden_size_(hidden_size),
      reverse_(reverse),
      w_input_(store.add(prefix + ".w_input", 3 * static_cast<Eigen::Index>(hidden_size), input_size)),
      w_hidden_(store.add(prefix + ".w_hidden", 3 * static_cast<Eigen::Index>(hidden_size), hidden_size)),
      bias_(store.add(prefix + ".b_input", 1, 3 * static_cast<Eigen::Index>(hidden_size))),
      bias_hidden_(store.add(prefix + ".b_hidden", 1, 3 * static_cast<Eigen::Index>(hidden_size))),
      ws_(std::make_unique<Workspace>()) {}

GruLayer::~GruLayer() = default;

void GruLayer::init_parameters(Rng& rng) {
  glorot_uniform(w_input_.value, rng);
  orthogonal_blocks(w_hidden_.value, 3, rng);
  bias_.value.setZero();
  bias_hidden_.value.setZero();
}

std::size_t GruLayer::workspace_capacity() const noexcept {
  const Workspace& w = *ws_;
  return w.x.capacity_bytes() + w.gates.capacity_bytes() + w.hn.capacity_bytes() + w.h.capacity_bytes() +
         w.h_prev.capacity_bytes() + w.h0.capacity_bytes() + w.step.capacity_bytes() +
         w.dgi.capacity_bytes() + w.dgh.capacity_bytes() + w.dx.capacity_bytes() + w.packs.capacity_bytes();
}

void GruLayer::reserve_packs() {
  ws_->packs.reserve(3, hidden_size_, input_size_);
}

void GruLayer::pack_weights(int part, int parts) {
  ws_->packs.pack(w_hidden_.value.data(), w_input_.value.data(), 3, hidden_size_, input_size_, part, parts);
}

void GruLayer::read_packs_from(const RecurrentLayer* source) {
  ws_->packs.shared =
      source == nullptr
          ? nullptr
          : &detail::same_layer(*source, *this,
                                "GruLayer::read_packs_from: the source is not a GRU layer of the same shape")
                 .ws_->packs.own;
}

void GruLayer::forward(Eigen::Ref<const Matrix> x, int T, std::span<const int> lengths,
                       Eigen::Ref<Matrix> out, const MatrixBuffer* h0, const MatrixBuffer* /*c0*/,
                       MatrixBuffer* h_final, MatrixBuffer* /*c_final*/) {
  const Eigen::Index B = detail::check_batch("GruLayer::forward", x.rows(), T, lengths, 0);
  const Eigen::Index H = hidden_size_, D = input_size_;
  GYRE_CHECK(x.cols() == D, "GruLayer::forward: input has " + std::to_string(x.cols()) +
                                " columns, layer expects " + std::to_string(D));
  GYRE_CHECK(out.rows() == x.rows() && out.cols() == H,
             "GruLayer::forward: output must be [T*B x hidden_size]");
  GYRE_CHECK(h0 == nullptr || (h0->rows() == B && h0->cols() == H), "GruLayer::forward: h0 must be [B x H]");
  Workspace& w = *ws_;
  detail::SequenceLayout& lay = w.layout;
  lay.build(lengths, T, reverse_);
  w.ready = true;
  const Eigen::Index N = lay.rows();

  MatrixMap xs = w.x.view(N, D);
  MatrixMap gates = w.gates.view(N, 3 * H);
  MatrixMap hn = w.hn.view(N, H), hs = w.h.view(N, H), h_prev = w.h_prev.view(N, H);
  MatrixMap hi = w.h0.view(B, H);
  MatrixMap step = w.step.view(B, 3 * H);

  for (Eigen::Index p = 0; p < N; ++p) detail::copy_floats(xs.row(p).data(), x.row(lay.source(p)).data(), D);
  for (int j = 0; j < B; ++j) {
    if (h0 != nullptr)
      hi.row(j) = h0->view().row(lay.sequence(j));
    else
      hi.row(j).setZero();
  }
  // Packs made for this step by pack_weights (fast-kernel path only), or null: pack here.
  const detail::WeightPacks* shared = w.packs.made();
  if (shared != nullptr)
    detail::fast::gemm_packed(N, 3 * H, D, xs.data(), xs.outerStride(), false, shared->in_fwd.data(),
                              gates.data(), gates.outerStride(), false, nullptr, bias_.value.data());
  else
    w.gemm_input.run(gates, xs, detail::Op::kN, w_input_.value, detail::Op::kT, false, bias_.value.data());

  const Matrix& U = w_hidden_.value;
  const auto bh = bias_hidden_.value.row(0);
  const float* u_step = w.packs.step(U.data(), 3, H);  // null: no fused step
  for (int s = 0; s < T; ++s) {
    const Eigen::Index n = lay.count(s), o = lay.offset(s);
    if (n == 0) break;
    if (s == 0)
      detail::copy_floats(h_prev.row(o).data(), hi.data(), n * H);
    else
      detail::copy_floats(h_prev.row(o).data(), hs.row(lay.offset(s - 1)).data(), n * H);
    if (u_step != nullptr) {
      detail::fast::gru_step(n, H, h_prev.row(o).data(), H, u_step, bias_hidden_.value.data(),
                             gates.row(o).data(), hn.row(o).data(), hs.row(o).data());
      continue;
    }
    auto st = step.topRows(n);
    // All three recurrent gates from one GEMM ("reset after": r multiplies U[h~] h + b_hidden[h~]).
    w.gemm_step.run(st, h_prev.middleRows(o, n), detail::Op::kN, U, detail::Op::kT, false);
    st.rowwise() += bh;
    auto g = gates.middleRows(o, n);
    g.leftCols(2 * H) = (g.leftCols(2 * H) + st.leftCols(2 * H)).array().logistic().matrix();  // r, z
    hn.middleRows(o, n) = st.rightCols(H);
    g.rightCols(H) =
        (g.rightCols(H).array() + g.leftCols(H).array() * hn.middleRows(o, n).array()).tanh().matrix();
    const auto z = g.middleCols(H, H).array();
    hs.middleRows(o, n).array() = (1.0f - z) * g.rightCols(H).array() + z * h_prev.middleRows(o, n).array();
  }

  lay.zero_padding(out);
  for (Eigen::Index p = 0; p < N; ++p)
    detail::copy_floats(out.row(lay.source(p)).data(), hs.row(p).data(), H);
  if (h_final != nullptr) {
    MatrixMap hf = h_final->shape(B, H);
    for (int j = 0; j < B; ++j) {
      const int len = lay.length(j);
      if (len == 0)
        hf.row(lay.sequence(j)) = hi.row(j);
      else
        hf.row(lay.sequence(j)) = hs.row(lay.offset(len - 1) + j);
    }
  }
}

void GruLayer::backward_into(Eigen::Ref<const Matrix> d_out, MatrixMap* d_x, bool accumulate_dx, Matrix* d_h0,
                             Matrix* /*d_c0*/) {
  Workspace& w = *ws_;
  GYRE_CHECK(w.ready, "GruLayer::backward called before forward");
  const detail::SequenceLayout& lay = w.layout;
  const Eigen::Index B = lay.batch(), H = hidden_size_, D = input_size_, TB = lay.steps() * B, N = lay.rows();
  GYRE_CHECK(d_out.rows() == TB && d_out.cols() == H,
             "GruLayer::backward: d_out must be [T*B x hidden_size]");

  MatrixMap xs = w.x.view(N, D);
  MatrixMap gates = w.gates.view(N, 3 * H);
  MatrixMap hn = w.hn.view(N, H), h_prev = w.h_prev.view(N, H);
  MatrixMap dh = w.h0.view(B, H);
  MatrixMap dgi = w.dgi.view(N, 3 * H), dgh = w.dgh.view(N, 3 * H);

  dh.setZero();
  const Matrix& U = w_hidden_.value;
  const bool fast = detail::fast::available();
  const detail::WeightPacks* shared = w.packs.made();
  const float* u_back = w.packs.back(U.data(), 3, H);
  for (int s = lay.steps() - 1; s >= 0; --s) {
    const Eigen::Index n = lay.count(s), o = lay.offset(s);
    if (n == 0) continue;
    if (fast) {
      // Element-wise part in one vector pass (d_out rows gathered in it), then dh += dG_h U.
      detail::fast::gru_cell_backward(n, H, d_out.data(), d_out.outerStride(), lay.sources(o), dh.data(),
                                      gates.row(o).data(), hn.row(o).data(), h_prev.row(o).data(),
                                      dgi.row(o).data(), dgh.row(o).data());
      detail::fast::gemm_packed(n, H, 3 * H, dgh.row(o).data(), 3 * H, false, u_back, dh.data(), H, true,
                                nullptr);
      continue;
    }
    for (Eigen::Index j = 0; j < n; ++j) dh.row(j) += d_out.row(lay.source(o + j));
    const auto a = gates.middleRows(o, n).array();
    const auto r = a.leftCols(H), z = a.middleCols(H, H), nn = a.rightCols(H);
    auto dH = dh.topRows(n).array();
    auto gi = dgi.middleRows(o, n).array();
    auto gh = dgh.middleRows(o, n).array();
    gi.rightCols(H) = dH * (1.0f - z) * (1.0f - nn * nn);                                // d a_n
    gi.leftCols(H) = gi.rightCols(H) * hn.middleRows(o, n).array() * r * (1.0f - r);     // d a_r
    gi.middleCols(H, H) = dH * (h_prev.middleRows(o, n).array() - nn) * z * (1.0f - z);  // d a_z
    gh.leftCols(2 * H) = gi.leftCols(2 * H);
    gh.rightCols(H) = gi.rightCols(H) * r;
    dH *= z;  // direct path h' = ... + z * h
    w.gemm_back.run(dh.topRows(n), dgh.middleRows(o, n), detail::Op::kN, U, detail::Op::kN, true);
  }

  w.gemm_dw_input.run(w_input_.grad, dgi, detail::Op::kT, xs, detail::Op::kN, true);
  w.gemm_dw_hidden.run(w_hidden_.grad, dgh, detail::Op::kT, h_prev, detail::Op::kN, true);
  detail::add_column_sums(dgi, bias_.grad.row(0).data());
  detail::add_column_sums(dgh, bias_hidden_.grad.row(0).data());
  if (d_x != nullptr) {
    GYRE_CHECK(d_x->rows() == TB && d_x->cols() == D, "GruLayer::backward: d_x has the wrong shape");
    MatrixMap dxs = w.dx.view(N, D);
    if (shared != nullptr)
      detail::fast::gemm_packed(N, D, 3 * H, dgi.data(), dgi.outerStride(), false, shared->in_back.data(),
                                dxs.data(), dxs.outerStride(), false, nullptr);
    else
      w.gemm_dx.run(dxs, dgi, detail::Op::kN, w_input_.value, detail::Op::kN, false);
    if (accumulate_dx) {
      for (Eigen::Index p = 0; p < N; ++p) d_x->row(lay.source(p)) += dxs.row(p);
    } else {
      lay.scatter_into_zeros(dxs, *d_x);
    }
  }
  if (d_h0 != nullptr) {
    if (d_h0->rows() != B || d_h0->cols() != H) d_h0->resize(B, H);
    for (int j = 0; j < B; ++j) d_h0->row(lay.sequence(j)) = dh.row(j);
  }
}

}  // namespace gyre::nn
