#include "gyre/optim/lr_schedule.hpp"

#include <algorithm>
#include <cmath>
#include <numbers>

#include "gyre/core/error.hpp"

namespace gyre::optim {

namespace {
void check_base(const ScheduleConfig& c) {
  if (!(c.base_rate > 0.0F && std::isfinite(c.base_rate)))
    throw ConfigError("learning_rate", "must be finite and > 0, got " + std::to_string(c.base_rate));
  if (c.warmup_steps < 0) throw ConfigError("warmup_steps", "must be >= 0");
}

// Linear warm-up factor for step s (0-based): (s + 1) / W while s < W, else 1.
double warmup_factor(std::int64_t step, std::int64_t warmup) {
  if (step >= warmup) return 1.0;
  return static_cast<double>(step + 1) / static_cast<double>(warmup);
}
}  // namespace

bool LearningRateSchedule::observe(double /*metric*/) {
  return false;
}

std::vector<StateScalar> LearningRateSchedule::state() const {
  return {};
}

void LearningRateSchedule::load_state(const std::vector<StateScalar>& state) {
  if (!state.empty())
    throw Error("schedule '" + std::string(name()) + "' has no state, but the checkpoint holds '" +
                state.front().first + "'");
}

ConstantSchedule::ConstantSchedule(const ScheduleConfig& config)
    : base_(config.base_rate), warmup_(config.warmup_steps) {
  check_base(config);
}

float ConstantSchedule::rate(std::int64_t step) const {
  GYRE_CHECK(step >= 0, "schedule step must be >= 0");
  return static_cast<float>(base_ * warmup_factor(step, warmup_));
}

WarmupDecaySchedule::WarmupDecaySchedule(const ScheduleConfig& config, Shape shape)
    : base_(config.base_rate),
      floor_(config.floor_rate),
      warmup_(config.warmup_steps),
      total_(config.total_steps),
      shape_(shape) {
  check_base(config);
  if (total_ <= warmup_)
    throw ConfigError("total_steps", "must be greater than warmup_steps (" + std::to_string(warmup_) +
                                         "), got " + std::to_string(total_));
  if (!(floor_ >= 0.0F && floor_ <= base_))
    throw ConfigError("floor_rate", "must be in [0, learning rate], got " + std::to_string(floor_));
}

float WarmupDecaySchedule::rate(std::int64_t step) const {
  GYRE_CHECK(step >= 0, "schedule step must be >= 0");
  if (step < warmup_) return static_cast<float>(base_ * warmup_factor(step, warmup_));
  const double progress =
      std::min(1.0, static_cast<double>(step - warmup_) / static_cast<double>(total_ - warmup_));
  const double span = static_cast<double>(base_) - static_cast<double>(floor_);
  const double shape =
      shape_ == Shape::kLinear ? 1.0 - progress : 0.5 * (1.0 + std::cos(std::numbers::pi * progress));
  return static_cast<float>(static_cast<double>(floor_) + span * shape);
}

PlateauSchedule::PlateauSchedule(const ScheduleConfig& config)
    : factor_(config.plateau_factor),
      patience_(config.plateau_patience),
      min_rate_(config.plateau_min_rate),
      goal_(config.plateau_goal),
      min_gain_(config.plateau_min_gain),
      rate_(config.base_rate) {
  check_base(config);
  if (config.warmup_steps != 0) throw ConfigError("warmup_steps", "is not supported by the plateau schedule");
  if (!(factor_ > 0.0F && factor_ < 1.0F))
    throw ConfigError("plateau_factor", "must be in (0, 1), got " + std::to_string(factor_));
  if (patience_ < 1) throw ConfigError("plateau_patience", "must be >= 1, got " + std::to_string(patience_));
  if (!(min_rate_ >= 0.0F && min_rate_ <= config.base_rate))
    throw ConfigError("plateau_min_rate", "must be in [0, learning rate], got " + std::to_string(min_rate_));
  if (!(min_gain_ >= 0.0 && std::isfinite(min_gain_)))
    throw ConfigError("plateau_min_gain", "must be finite and >= 0");
}

float PlateauSchedule::rate(std::int64_t step) const {
  GYRE_CHECK(step >= 0, "schedule step must be >= 0");
  return rate_;
}

bool PlateauSchedule::observe(double metric) {
  if (!std::isfinite(metric)) throw DivergenceError("plateau schedule: validation metric is not finite");
  if (!has_best_) {
    has_best_ = true;
    best_ = metric;
    misses_ = 0;
    return false;
  }
  const bool improved =
      goal_ == PlateauGoal::kLower ? metric < best_ - min_gain_ : metric > best_ + min_gain_;
  if (improved) {
    best_ = metric;
    misses_ = 0;
    return false;
  }
  if (++misses_ < patience_) return false;
  misses_ = 0;
  const float lowered = std::max(rate_ * factor_, min_rate_);
  const bool changed = lowered < rate_;
  rate_ = lowered;
  return changed;
}

std::vector<StateScalar> PlateauSchedule::state() const {
  return {{"rate", static_cast<double>(rate_)},
          {"has_best", has_best_ ? 1.0 : 0.0},
          {"best", best_},
          {"misses", static_cast<double>(misses_)}};
}

void PlateauSchedule::load_state(const std::vector<StateScalar>& state) {
  const auto get = [&state](std::string_view key) {
    for (const auto& [k, v] : state)
      if (k == key) return v;
    throw Error("plateau schedule state lacks '" + std::string(key) + "'");
  };
  for (const auto& [k, v] : state)
    if (k != "rate" && k != "has_best" && k != "best" && k != "misses")
      throw Error("plateau schedule state has unexpected entry '" + k + "'");
  const double rate = get("rate");
  const double misses = get("misses");
  const double has_best = get("has_best");
  if (!(rate > 0.0 && std::isfinite(rate)))
    throw Error("plateau schedule state: rate must be finite and > 0");
  if (!(misses >= 0.0 && misses < 9.0e15 && misses == std::floor(misses)))
    throw Error("plateau schedule state: misses must be a non-negative integer");
  if (has_best != 0.0 && has_best != 1.0) throw Error("plateau schedule state: has_best must be 0 or 1");
  rate_ = static_cast<float>(rate);
  has_best_ = has_best == 1.0;
  best_ = get("best");
  misses_ = static_cast<std::int64_t>(misses);
}

const char* to_string(ScheduleKind kind) noexcept {
  switch (kind) {
    case ScheduleKind::kConstant:
      return "constant";
    case ScheduleKind::kLinear:
      return "linear";
    case ScheduleKind::kCosine:
      return "cosine";
    case ScheduleKind::kPlateau:
      return "plateau";
  }
  return "?";
}

std::unique_ptr<LearningRateSchedule> make_schedule(ScheduleKind kind, const ScheduleConfig& config) {
  switch (kind) {
    case ScheduleKind::kConstant:
      return std::make_unique<ConstantSchedule>(config);
    case ScheduleKind::kLinear:
      return std::make_unique<WarmupDecaySchedule>(config, WarmupDecaySchedule::Shape::kLinear);
    case ScheduleKind::kCosine:
      return std::make_unique<WarmupDecaySchedule>(config, WarmupDecaySchedule::Shape::kCosine);
    case ScheduleKind::kPlateau:
      return std::make_unique<PlateauSchedule>(config);
  }
  throw ConfigError("schedule", "unknown schedule");
}

std::unique_ptr<LearningRateSchedule> make_schedule(std::string_view name, const ScheduleConfig& config) {
  for (const auto kind :
       {ScheduleKind::kConstant, ScheduleKind::kLinear, ScheduleKind::kCosine, ScheduleKind::kPlateau})
    if (name == to_string(kind)) return make_schedule(kind, config);
  throw ConfigError("schedule", "unknown schedule '" + std::string(name) +
                                    "'; expected constant, linear, cosine or plateau");
}

}  // namespace gyre::optim
