#pragma once
// Gradient clipping by global norm (Pascanu, Mikolov & Bengio 2013, "On the difficulty of
// training recurrent neural networks", Algorithm 1): if the L2 norm of all gradients taken
// together exceeds max_norm, every gradient is multiplied by max_norm / norm.

#include "gyre/nn/parameter.hpp"

namespace gyre::optim {

struct ClipResult {
  double norm = 0.0;     // global L2 norm of the gradients before clipping
  bool finite = true;    // false: some gradient is NaN or infinite (then nothing was scaled)
  bool clipped = false;  // true: gradients were scaled by max_norm / norm
};

/// Global L2 norm of the gradients of all trainable parameters, accumulated in double. For
/// sparse-row parameters only touched rows are read (the others are zero by contract).
/// Returns NaN or +inf when a gradient is not finite.
double global_grad_norm(const nn::ParameterStore& params);
/// Sum of squares of `count` floats, accumulated in double (the building block of
/// global_grad_norm; the trainer's parallel step sums parts of parameters with it).
double sum_squares(const float* data, Eigen::Index count);

/// Computes the global norm and, when it is finite and greater than max_norm, scales the
/// gradients of all trainable parameters (touched rows only for sparse ones) by max_norm / norm.
/// A non-finite norm is reported (finite = false) and the gradients are left as they are, so
/// the trainer can stop with gyre::DivergenceError. max_norm must be finite and > 0 (GYRE_CHECK).
/// Sorts and de-duplicates touched_rows (Parameter::finalize_touched_rows()).
ClipResult clip_grad_norm(nn::ParameterStore& params, double max_norm);

}  // namespace gyre::optim
