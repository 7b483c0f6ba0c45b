#pragma once
// A small, strict JSON (RFC 8259) reader and writer for the runtime's model-file header. The
// runtime may not depend on nlohmann/json, so it carries its own. Strict: no comments, no
// trailing commas, no NaN/Infinity, no duplicate object keys, well-formed UTF-8 only, nesting
// depth bounded by kMaxDepth. Errors say "line L, column C: what".

#include <cstddef>
#include <cstdint>
#include <string>
#include <string_view>
#include <vector>

namespace gyre::runtime::detail {

class Json {
 public:
  enum class Type { kNull, kBool, kNumber, kString, kArray, kObject };
  static constexpr int kMaxDepth = 64;

  Json() = default;
  static Json null() { return Json(); }
  static Json boolean(bool b);
  static Json number(double d);
  static Json string(std::string s);
  static Json array();
  static Json object();

  /// Parses a complete document; throws runtime::Error("<what>: line L, column C: ...").
  static Json parse(std::string_view text, std::string_view what = "JSON");

  Type type() const { return type_; }
  bool is_null() const { return type_ == Type::kNull; }
  bool is_bool() const { return type_ == Type::kBool; }
  bool is_number() const { return type_ == Type::kNumber; }
  bool is_string() const { return type_ == Type::kString; }
  bool is_array() const { return type_ == Type::kArray; }
  bool is_object() const { return type_ == Type::kObject; }

  bool as_bool() const { return bool_; }
  double as_number() const { return number_; }
  const std::string& as_string() const { return string_; }
  /// Array elements, or object values (in document order, matching keys()).
  const std::vector<Json>& items() const { return items_; }
  const std::vector<std::string>& keys() const { return keys_; }
  std::size_t size() const { return items_.size(); }

  /// Object member or nullptr.
  const Json* find(std::string_view key) const;

  /// Building: append to an array / add a member to an object (keys must be unique).
  Json& push_back(Json value);
  Json& set(std::string key, Json value);

  /// Compact serialisation (numbers in shortest round-trip form, integers without exponent).
  std::string dump() const;

 private:
  friend class JsonParser;
  void dump_to(std::string& out) const;

  Type type_ = Type::kNull;
  bool bool_ = false;
  double number_ = 0.0;
  std::string string_;
  std::vector<Json> items_;
  std::vector<std::string> keys_;
};

/// Appends s as a JSON string literal (quotes and escapes) to out.
void json_escape(std::string_view s, std::string& out);

}  // namespace gyre::runtime::detail
