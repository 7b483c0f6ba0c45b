#pragma once
// Deterministic weight initialisation (DEVELOPERS.md "Initialisation"). All draws come from the
// caller's gyre::Rng, so the same seed gives the same weights on every platform.

#include "gyre/core/rng.hpp"
#include "gyre/nn/tensor.hpp"

namespace gyre::nn {

/// Glorot/Xavier uniform (Glorot & Bengio 2010, eq. 16): U(-a, a) with
/// a = gain * sqrt(6 / (fan_in + fan_out)); for a weight [out x in], fan_in = cols, fan_out = rows.
void glorot_uniform(Matrix& w, Rng& rng, float gain = 1.0f);

/// Same, but with explicit fans (used for gate-stacked weights, where each [H x D] gate block is
/// one layer's worth of fan-out).
void glorot_uniform(Matrix& w, Rng& rng, int fan_in, int fan_out, float gain = 1.0f);

/// Orthogonal initialisation (Saxe et al. 2014): Q of the QR decomposition (Householder) of a
/// standard-normal matrix, columns sign-corrected by sign(diag(R)) so that Q is Haar-distributed
/// (Mezzadri 2007). For rows >= cols Q has orthonormal columns, otherwise orthonormal rows.
void orthogonal(Matrix& w, Rng& rng, float gain = 1.0f);

/// Orthogonal init of each of the `blocks` stacked [n x cols] row blocks of w separately (w has
/// blocks * n rows). Recurrent weights [G*H x H] use this: every gate's U is an orthogonal H x H.
void orthogonal_blocks(Matrix& w, int blocks, Rng& rng, float gain = 1.0f);

/// i.i.d. N(0, 1) * stddev.
void normal(Matrix& w, Rng& rng, float stddev);

}  // namespace gyre::nn
