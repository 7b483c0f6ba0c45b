#pragma once
// Learning-rate schedules. A schedule maps the optimizer step index to a rate; reduce-on-plateau
// instead changes its rate when the trainer reports a validation metric.
//
//   constant: base_rate (after the optional warm-up)
//   linear:   warm-up, then straight line from base_rate to floor_rate at total_steps
//   cosine:   warm-up, then floor + (base - floor) * (1 + cos(pi * p)) / 2, p in [0, 1]
//             (the annealing of Loshchilov & Hutter 2017, "SGDR", eq. 5, without restarts)
//   plateau:  base_rate, multiplied by plateau_factor (not below plateau_min_rate) after
//             plateau_patience consecutive evaluations without improvement
//
// Step index s is the number of optimizer steps already taken (0 for the first step). Warm-up
// (warmup_steps = W > 0) is linear: rate(s) = base_rate * (s + 1) / W for s < W, so the first
// step uses base/W and step W-1 reaches base_rate (warm-up as in Goyal et al. 2017, section 2.2;
// the exact ramp is common practice). Decay then runs over steps W .. total_steps with
// p = (s - W) / (total_steps - W), clamped to [0, 1]: the rate is floor_rate from total_steps on.

#include <cstdint>
#include <memory>
#include <string>
#include <string_view>
#include <utility>
#include <vector>

namespace gyre::optim {

/// A named scalar of schedule state (counts are stored exactly: |value| < 2^53).
using StateScalar = std::pair<std::string, double>;

class LearningRateSchedule {
 public:
  virtual ~LearningRateSchedule() = default;
  /// Rate for the optimizer step with 0-based index `step` (>= 0).
  virtual float rate(std::int64_t step) const = 0;
  /// Reports a validation metric (once per evaluation). Only reduce-on-plateau uses it; returns
  /// true when this call lowered the rate. Throws gyre::DivergenceError for a non-finite metric
  /// on the plateau schedule.
  virtual bool observe(double metric);
  /// State for checkpoints (empty for the step-driven schedules, which have none).
  virtual std::vector<StateScalar> state() const;
  /// Restores what state() returned. Throws gyre::Error if a name is missing or unexpected.
  virtual void load_state(const std::vector<StateScalar>& state);
  /// "constant", "linear", "cosine" or "plateau".
  virtual std::string_view name() const noexcept = 0;
};

enum class PlateauGoal { kLower, kHigher };  // loss-like metric vs accuracy-like metric

struct ScheduleConfig {
  float base_rate = 1e-3F;            // peak learning rate
  std::int64_t warmup_steps = 0;      // linear ramp length (constant, linear, cosine)
  std::int64_t total_steps = 0;       // linear, cosine: step at which floor_rate is reached
  float floor_rate = 0.0F;            // linear, cosine: final rate, in [0, base_rate]
  float plateau_factor = 0.5F;        // plateau: multiplier in (0, 1)
  std::int64_t plateau_patience = 2;  // plateau: evaluations without improvement before a cut (>= 1)
  float plateau_min_rate = 0.0F;      // plateau: the rate never goes below this
  PlateauGoal plateau_goal = PlateauGoal::kLower;
  double plateau_min_gain = 0.0;  // plateau: improvement must exceed this (absolute, >= 0)
};

/// Constant rate with optional linear warm-up.
class ConstantSchedule final : public LearningRateSchedule {
 public:
  explicit ConstantSchedule(const ScheduleConfig& config);
  float rate(std::int64_t step) const override;
  std::string_view name() const noexcept override { return "constant"; }

 private:
  float base_;
  std::int64_t warmup_;
};

/// Linear warm-up, then linear or cosine decay to floor_rate.
class WarmupDecaySchedule final : public LearningRateSchedule {
 public:
  enum class Shape { kLinear, kCosine };
  WarmupDecaySchedule(const ScheduleConfig& config, Shape shape);
  float rate(std::int64_t step) const override;
  std::string_view name() const noexcept override { return shape_ == Shape::kLinear ? "linear" : "cosine"; }

 private:
  float base_;
  float floor_;
  std::int64_t warmup_;
  std::int64_t total_;
  Shape shape_;
};

/// Reduce-on-plateau. The first observed metric sets the best value. A later metric improves
/// when it is better than the best by more than plateau_min_gain (lower or higher, per goal);
/// otherwise it counts as a miss. After plateau_patience consecutive misses the rate becomes
/// max(rate * plateau_factor, plateau_min_rate) and the miss count restarts at 0.
class PlateauSchedule final : public LearningRateSchedule {
 public:
  explicit PlateauSchedule(const ScheduleConfig& config);
  float rate(std::int64_t step) const override;
  bool observe(double metric) override;
  std::vector<StateScalar> state() const override;
  void load_state(const std::vector<StateScalar>& state) override;
  std::string_view name() const noexcept override { return "plateau"; }

  float current_rate() const noexcept { return rate_; }
  std::int64_t misses() const noexcept { return misses_; }

 private:
  float factor_;
  std::int64_t patience_;
  float min_rate_;
  PlateauGoal goal_;
  double min_gain_;
  float rate_;
  bool has_best_ = false;
  double best_ = 0.0;
  std::int64_t misses_ = 0;
};

enum class ScheduleKind { kConstant, kLinear, kCosine, kPlateau };
/// "constant", "linear", "cosine", "plateau".
const char* to_string(ScheduleKind kind) noexcept;

/// Builds the schedule. Throws gyre::ConfigError("schedule", ...) for inconsistent settings
/// (e.g. linear/cosine without total_steps > warmup).
std::unique_ptr<LearningRateSchedule> make_schedule(ScheduleKind kind, const ScheduleConfig& config);
/// The same by name; throws gyre::ConfigError("schedule", ...) for another name.
std::unique_ptr<LearningRateSchedule> make_schedule(std::string_view name, const ScheduleConfig& config);

}  // namespace gyre::optim
