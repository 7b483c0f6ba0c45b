#include "gyre/nn/gru_layer.hpp"

#include <string>

#include "detail/buffer.hpp"
#include "detail/gemm.hpp"
#include "gyre/core/error.hpp"
#include "gyre/nn/init.hpp"

namespace gyre::nn {

// Caches indexed by the time row r = t*B + b (see lstm_layer.cpp).
struct GruLayer::Workspace {
  const Matrix* x = nullptr;
  int T = 0;
  Eigen::Index B = 0;
  std::vector<int> lengths;
  // One GEMM object per call site: each keeps its packing buffers (see detail/gemm.hpp).
  detail::Gemm gemm_input, gemm_step, gemm_back, gemm_dw_input, gemm_dw_hidden, gemm_dx;
  detail::GrowBuffer gates;   // [T*B x 3H]: W x + b_i, then activations r z n in place
  detail::GrowBuffer hn;      // [T*B x H]: U_n h + b_hn (the term r multiplies)
  detail::GrowBuffer h_prev;  // [T*B x H]: state before the step (zero on padded rows)
  detail::GrowBuffer step;    // [B x 3H]: U h + b_h of the step / hidden-side gate gradients
  detail::GrowBuffer h;       // [B x H]: running state (forward) / its gradient (backward)
  detail::GrowBuffer dh_direct;  // [B x H]: z * dh (backward)
  detail::GrowBuffer dgi;     // [T*B x 3H]: d loss / d input-side pre-activations
  detail::GrowBuffer dgh;     // [T*B x 3H]: d loss / d hidden-side pre-activations (U h + b_h)
};

GruLayer::GruLayer(ParameterStore& store, const std::string& prefix, int input_size, int hidden_size, bool reverse)
    : input_size_(input_size),
      hidden_size_(hidden_size),
      reverse_(reverse),
      w_input_(store.add(prefix + ".w_input", 3 * static_cast<Eigen::Index>(hidden_size), input_size)),
      w_hidden_(store.add(prefix + ".w_hidden", 3 * static_cast<Eigen::Index>(hidden_size), hidden_size)),
      bias_(store.add(prefix + ".bias", 1, 3 * static_cast<Eigen::Index>(hidden_size))),
      bias_hidden_(store.add(prefix + ".bias_hidden", 1, 3 * static_cast<Eigen::Index>(hidden_size))),
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
  return w.gates.capacity_bytes() + w.hn.capacity_bytes() + w.h_prev.capacity_bytes() + w.step.capacity_bytes() +
         w.h.capacity_bytes() + w.dh_direct.capacity_bytes() + w.dgi.capacity_bytes() + w.dgh.capacity_bytes();
}

void GruLayer::forward(const Matrix& x, int T, std::span<const int> lengths, Eigen::Ref<Matrix> out, const Matrix* h0,
                       const Matrix* /*c0*/, Matrix* h_final, Matrix* /*c_final*/) {
  const Eigen::Index B = detail::check_batch("GruLayer::forward", x.rows(), T, lengths, 0);
  const Eigen::Index H = hidden_size_, TB = x.rows();
  GYRE_CHECK(x.cols() == input_size_, "GruLayer::forward: input has " + std::to_string(x.cols()) +
                                          " columns, layer expects " + std::to_string(input_size_));
  GYRE_CHECK(out.rows() == TB && out.cols() == H, "GruLayer::forward: output must be [T*B x hidden_size]");
  GYRE_CHECK(h0 == nullptr || (h0->rows() == B && h0->cols() == H), "GruLayer::forward: h0 must be [B x H]");
  Workspace& w = *ws_;
  w.x = &x;
  w.T = T;
  w.B = B;
  w.lengths.assign(lengths.begin(), lengths.end());

  MatrixMap gates = w.gates.view(TB, 3 * H);
  MatrixMap hn = w.hn.view(TB, H);
  MatrixMap h_prev = w.h_prev.view(TB, H);
  MatrixMap step = w.step.view(B, 3 * H);
  MatrixMap h = w.h.view(B, H);

  w.gemm_input.run(gates, x, detail::Op::kN, w_input_.value, detail::Op::kT, false);
  gates.rowwise() += bias_.value.row(0);
  if (h0 != nullptr) h = *h0; else h.setZero();
  for (Eigen::Index b = 0; b < B; ++b)
    for (Eigen::Index t = lengths[static_cast<std::size_t>(b)]; t < T; ++t) {
      out.row(t * B + b).setZero();
      h_prev.row(t * B + b).setZero();
      hn.row(t * B + b).setZero();
    }

  const Matrix& U = w_hidden_.value;
  const auto bh = bias_hidden_.value.row(0);
  for (int s = 0; s < T; ++s) {
    w.gemm_step.run(step, h, detail::Op::kN, U, detail::Op::kT, false);  // all three recurrent gates in one GEMM ("reset after")
    for (Eigen::Index b = 0; b < B; ++b) {
      const int len = lengths[static_cast<std::size_t>(b)];
      if (s >= len) continue;
      const Eigen::Index r = static_cast<Eigen::Index>(reverse_ ? len - 1 - s : s) * B + b;
      auto a = gates.row(r);
      const auto st = step.row(b);
      a.segment(0, 2 * H).array() = (a.segment(0, 2 * H) + st.segment(0, 2 * H) + bh.segment(0, 2 * H)).array().logistic();
      hn.row(r) = st.segment(2 * H, H) + bh.segment(2 * H, H);
      a.segment(2 * H, H).array() = (a.segment(2 * H, H).array() + a.segment(0, H).array() * hn.row(r).array()).tanh();
      h_prev.row(r) = h.row(b);
      const auto z = a.segment(H, H).array();
      h.row(b).array() = (1.0f - z) * a.segment(2 * H, H).array() + z * h.row(b).array();
      out.row(r) = h.row(b);
    }
  }
  if (h_final != nullptr) *h_final = h;
}

void GruLayer::backward(Eigen::Ref<const Matrix> d_out, Matrix* d_x, bool accumulate_dx, Matrix* d_h0,
                        Matrix* /*d_c0*/) {
  Workspace& w = *ws_;
  GYRE_CHECK(w.x != nullptr, "GruLayer::backward called before forward");
  const Eigen::Index B = w.B, H = hidden_size_, TB = w.T * B;
  GYRE_CHECK(d_out.rows() == TB && d_out.cols() == H, "GruLayer::backward: d_out must be [T*B x hidden_size]");
  GYRE_CHECK(w.x->rows() == TB && w.x->cols() == input_size_,
             "GruLayer::backward: the forward input changed shape before backward");
  const int T = w.T;
  const auto& lengths = w.lengths;

  MatrixMap gates = w.gates.view(TB, 3 * H);
  MatrixMap hn = w.hn.view(TB, H);
  MatrixMap h_prev = w.h_prev.view(TB, H);
  MatrixMap dstep = w.step.view(B, 3 * H);
  MatrixMap dh = w.h.view(B, H);
  MatrixMap dh_direct = w.dh_direct.view(B, H);
  MatrixMap dgi = w.dgi.view(TB, 3 * H);
  MatrixMap dgh = w.dgh.view(TB, 3 * H);

  dh.setZero();
  for (Eigen::Index b = 0; b < B; ++b)
    for (Eigen::Index t = lengths[static_cast<std::size_t>(b)]; t < T; ++t) {
      dgi.row(t * B + b).setZero();
      dgh.row(t * B + b).setZero();
    }

  const Matrix& U = w_hidden_.value;
  for (int s = T - 1; s >= 0; --s) {
    for (Eigen::Index b = 0; b < B; ++b) {
      const int len = lengths[static_cast<std::size_t>(b)];
      if (s >= len) {
        dstep.row(b).setZero();
        dh_direct.row(b) = dh.row(b);
        continue;
      }
      const Eigen::Index r = static_cast<Eigen::Index>(reverse_ ? len - 1 - s : s) * B + b;
      const auto a = gates.row(r).array();
      const auto rg = a.segment(0, H), z = a.segment(H, H), n = a.segment(2 * H, H);
      auto dhb = dh.row(b).array();
      dhb += d_out.row(r).array();
      auto gi = dgi.row(r).array();
      auto gh = dgh.row(r).array();
      // n block first: d a_n = dh (1 - z)(1 - n^2)
      gi.segment(2 * H, H) = dhb * (1.0f - z) * (1.0f - n * n);
      gi.segment(0, H) = gi.segment(2 * H, H) * hn.row(r).array() * rg * (1.0f - rg);
      gi.segment(H, H) = dhb * (h_prev.row(r).array() - n) * z * (1.0f - z);
      gh.segment(0, 2 * H) = gi.segment(0, 2 * H);
      gh.segment(2 * H, H) = gi.segment(2 * H, H) * rg;
      dh_direct.row(b).array() = dhb * z;
      dstep.row(b) = dgh.row(r);
    }
    dh = dh_direct;
    w.gemm_back.run(dh, dstep, detail::Op::kN, U, detail::Op::kN, true);
  }

  w.gemm_dw_input.run(w_input_.grad, dgi, detail::Op::kT, *w.x, detail::Op::kN, true);
  w.gemm_dw_hidden.run(w_hidden_.grad, dgh, detail::Op::kT, h_prev, detail::Op::kN, true);
  bias_.grad.row(0).noalias() += dgi.colwise().sum();
  bias_hidden_.grad.row(0).noalias() += dgh.colwise().sum();
  if (d_x != nullptr) {
    if (accumulate_dx) {
      GYRE_CHECK(d_x->rows() == TB && d_x->cols() == input_size_, "GruLayer::backward: d_x has the wrong shape");
      w.gemm_dx.run(*d_x, dgi, detail::Op::kN, w_input_.value, detail::Op::kN, true);
    } else {
      if (d_x->rows() != TB || d_x->cols() != input_size_) d_x->resize(TB, input_size_);
      w.gemm_dx.run(*d_x, dgi, detail::Op::kN, w_input_.value, detail::Op::kN, false);
    }
  }
  if (d_h0 != nullptr) *d_h0 = dh;
}

}  // namespace gyre::nn
