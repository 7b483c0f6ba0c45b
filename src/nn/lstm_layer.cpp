#include "gyre/nn/lstm_layer.hpp"

#include <string>

#include "detail/buffer.hpp"
#include "detail/gemm.hpp"
#include "gyre/core/error.hpp"
#include "gyre/nn/init.hpp"

namespace gyre::nn {

// Caches for backward, all indexed by the time row r = t*B + b (the row of x), so the weight
// gradients are single GEMMs over [T*B] rows after the time loop.
struct LstmLayer::Workspace {
  const Matrix* x = nullptr;
  int T = 0;
  Eigen::Index B = 0;
  std::vector<int> lengths;
  // One GEMM object per call site: each keeps its packing buffers (see detail/gemm.hpp).
  detail::Gemm gemm_input, gemm_step, gemm_back, gemm_dw_input, gemm_dw_hidden, gemm_dx;
  detail::GrowBuffer gates;   // [T*B x 4H]: input projection, then activations i f g o in place
  detail::GrowBuffer tanh_c;  // [T*B x H]: tanh(c') after the step
  detail::GrowBuffer c_prev;  // [T*B x H]: cell state before the step
  detail::GrowBuffer h_prev;  // [T*B x H]: hidden state before the step (zero on padded rows)
  detail::GrowBuffer step;    // [B x 4H]: U h of the current step / gate gradients of the step
  detail::GrowBuffer h, c;    // [B x H]: running state (forward) / its gradient (backward)
  detail::GrowBuffer dgates;  // [T*B x 4H]: d loss / d pre-activations
};

LstmLayer::LstmLayer(ParameterStore& store, const std::string& prefix, int input_size, int hidden_size, bool reverse)
    : input_size_(input_size),
      hidden_size_(hidden_size),
      reverse_(reverse),
      w_input_(store.add(prefix + ".w_input", 4 * static_cast<Eigen::Index>(hidden_size), input_size)),
      w_hidden_(store.add(prefix + ".w_hidden", 4 * static_cast<Eigen::Index>(hidden_size), hidden_size)),
      bias_(store.add(prefix + ".bias", 1, 4 * static_cast<Eigen::Index>(hidden_size))),
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
  return w.gates.capacity_bytes() + w.tanh_c.capacity_bytes() + w.c_prev.capacity_bytes() +
         w.h_prev.capacity_bytes() + w.step.capacity_bytes() + w.h.capacity_bytes() + w.c.capacity_bytes() +
         w.dgates.capacity_bytes();
}

void LstmLayer::forward(const Matrix& x, int T, std::span<const int> lengths, Eigen::Ref<Matrix> out, const Matrix* h0,
                        const Matrix* c0, Matrix* h_final, Matrix* c_final) {
  const Eigen::Index B = detail::check_batch("LstmLayer::forward", x.rows(), T, lengths, 0);
  const Eigen::Index H = hidden_size_, TB = x.rows();
  GYRE_CHECK(x.cols() == input_size_, "LstmLayer::forward: input has " + std::to_string(x.cols()) +
                                          " columns, layer expects " + std::to_string(input_size_));
  GYRE_CHECK(out.rows() == TB && out.cols() == H, "LstmLayer::forward: output must be [T*B x hidden_size]");
  GYRE_CHECK(h0 == nullptr || (h0->rows() == B && h0->cols() == H), "LstmLayer::forward: h0 must be [B x H]");
  GYRE_CHECK(c0 == nullptr || (c0->rows() == B && c0->cols() == H), "LstmLayer::forward: c0 must be [B x H]");
  Workspace& w = *ws_;
  w.x = &x;
  w.T = T;
  w.B = B;
  w.lengths.assign(lengths.begin(), lengths.end());

  MatrixMap gates = w.gates.view(TB, 4 * H);
  MatrixMap tanh_c = w.tanh_c.view(TB, H);
  MatrixMap c_prev = w.c_prev.view(TB, H);
  MatrixMap h_prev = w.h_prev.view(TB, H);
  MatrixMap step = w.step.view(B, 4 * H);
  MatrixMap h = w.h.view(B, H);
  MatrixMap c = w.c.view(B, H);

  // Input projection of all time steps in one GEMM, bias folded in.
  w.gemm_input.run(gates, x, detail::Op::kN, w_input_.value, detail::Op::kT, false);
  gates.rowwise() += bias_.value.row(0);
  if (h0 != nullptr) h = *h0; else h.setZero();
  if (c0 != nullptr) c = *c0; else c.setZero();
  for (Eigen::Index b = 0; b < B; ++b)
    for (Eigen::Index t = lengths[static_cast<std::size_t>(b)]; t < T; ++t) {
      out.row(t * B + b).setZero();
      h_prev.row(t * B + b).setZero();
      c_prev.row(t * B + b).setZero();
      tanh_c.row(t * B + b).setZero();
    }

  const Matrix& U = w_hidden_.value;
  for (int s = 0; s < T; ++s) {
    w.gemm_step.run(step, h, detail::Op::kN, U, detail::Op::kT, false);  // one fused gate GEMM over the batch
    for (Eigen::Index b = 0; b < B; ++b) {
      const int len = lengths[static_cast<std::size_t>(b)];
      if (s >= len) continue;  // padded step: state carried unchanged
      const Eigen::Index r = static_cast<Eigen::Index>(reverse_ ? len - 1 - s : s) * B + b;
      auto a = gates.row(r);
      a += step.row(b);
      a.segment(0, 2 * H) = a.segment(0, 2 * H).array().logistic();  // i, f
      a.segment(2 * H, H) = a.segment(2 * H, H).array().tanh();      // g
      a.segment(3 * H, H) = a.segment(3 * H, H).array().logistic();  // o
      c_prev.row(r) = c.row(b);
      h_prev.row(r) = h.row(b);
      c.row(b).array() = a.segment(H, H).array() * c.row(b).array() + a.segment(0, H).array() * a.segment(2 * H, H).array();
      tanh_c.row(r).array() = c.row(b).array().tanh();
      h.row(b).array() = a.segment(3 * H, H).array() * tanh_c.row(r).array();
      out.row(r) = h.row(b);
    }
  }
  if (h_final != nullptr) *h_final = h;
  if (c_final != nullptr) *c_final = c;
}

void LstmLayer::backward(Eigen::Ref<const Matrix> d_out, Matrix* d_x, bool accumulate_dx, Matrix* d_h0, Matrix* d_c0) {
  Workspace& w = *ws_;
  GYRE_CHECK(w.x != nullptr, "LstmLayer::backward called before forward");
  const Eigen::Index B = w.B, H = hidden_size_, TB = w.T * B;
  GYRE_CHECK(d_out.rows() == TB && d_out.cols() == H, "LstmLayer::backward: d_out must be [T*B x hidden_size]");
  GYRE_CHECK(w.x->rows() == TB && w.x->cols() == input_size_,
             "LstmLayer::backward: the forward input changed shape before backward");
  const int T = w.T;
  const auto& lengths = w.lengths;

  MatrixMap gates = w.gates.view(TB, 4 * H);
  MatrixMap tanh_c = w.tanh_c.view(TB, H);
  MatrixMap c_prev = w.c_prev.view(TB, H);
  MatrixMap h_prev = w.h_prev.view(TB, H);
  MatrixMap dstep = w.step.view(B, 4 * H);
  MatrixMap dh = w.h.view(B, H);
  MatrixMap dc = w.c.view(B, H);
  MatrixMap dgates = w.dgates.view(TB, 4 * H);

  dh.setZero();  // the gradient w.r.t. the final state is zero (window boundary)
  dc.setZero();
  for (Eigen::Index b = 0; b < B; ++b)
    for (Eigen::Index t = lengths[static_cast<std::size_t>(b)]; t < T; ++t) dgates.row(t * B + b).setZero();

  const Matrix& U = w_hidden_.value;
  for (int s = T - 1; s >= 0; --s) {
    for (Eigen::Index b = 0; b < B; ++b) {
      const int len = lengths[static_cast<std::size_t>(b)];
      if (s >= len) {
        dstep.row(b).setZero();  // padded: dh, dc pass through unchanged (and are zero here)
        continue;
      }
      const Eigen::Index r = static_cast<Eigen::Index>(reverse_ ? len - 1 - s : s) * B + b;
      const auto a = gates.row(r).array();
      const auto i = a.segment(0, H), f = a.segment(H, H), g = a.segment(2 * H, H), o = a.segment(3 * H, H);
      const auto tc = tanh_c.row(r).array();
      auto dhb = dh.row(b).array();
      dhb += d_out.row(r).array();
      auto dcb = dc.row(b).array();
      dcb += dhb * o * (1.0f - tc * tc);
      auto dg = dgates.row(r).array();
      dg.segment(0, H) = dcb * g * i * (1.0f - i);
      dg.segment(H, H) = dcb * c_prev.row(r).array() * f * (1.0f - f);
      dg.segment(2 * H, H) = dcb * i * (1.0f - g * g);
      dg.segment(3 * H, H) = dhb * tc * o * (1.0f - o);
      dcb *= f;
      dstep.row(b) = dgates.row(r);
    }
    w.gemm_back.run(dh, dstep, detail::Op::kN, U, detail::Op::kN, false);
  }

  w.gemm_dw_input.run(w_input_.grad, dgates, detail::Op::kT, *w.x, detail::Op::kN, true);
  w.gemm_dw_hidden.run(w_hidden_.grad, dgates, detail::Op::kT, h_prev, detail::Op::kN, true);
  bias_.grad.row(0).noalias() += dgates.colwise().sum();
  if (d_x != nullptr) {
    if (accumulate_dx) {
      GYRE_CHECK(d_x->rows() == TB && d_x->cols() == input_size_, "LstmLayer::backward: d_x has the wrong shape");
      w.gemm_dx.run(*d_x, dgates, detail::Op::kN, w_input_.value, detail::Op::kN, true);
    } else {
      if (d_x->rows() != TB || d_x->cols() != input_size_) d_x->resize(TB, input_size_);
      w.gemm_dx.run(*d_x, dgates, detail::Op::kN, w_input_.value, detail::Op::kN, false);
    }
  }
  if (d_h0 != nullptr) *d_h0 = dh;
  if (d_c0 != nullptr) *d_c0 = dc;
}

}  // namespace gyre::nn
