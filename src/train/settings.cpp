#include "gyre/train/settings.hpp"

#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstdlib>
#include <map>
#include <set>

#include "gyre/core/file.hpp"

namespace gyre::train {

using nlohmann::json;

namespace {

// Shortest text that reads back as the same double ("0.002", "1e-08", "5").
std::string number_text(double v) {
  char buf[32];
  for (int digits = 1; digits <= 17; ++digits) {
    std::snprintf(buf, sizeof buf, "%.*g", digits, v);
    if (std::strtod(buf, nullptr) == v) break;
  }
  return buf;
}

std::string bound_text(const SettingInfo& s, double v) {
  if (s.type == SettingType::kInteger ||
      (s.type == SettingType::kList && s.item_type == SettingType::kInteger)) {
    char buf[32];
    std::snprintf(buf, sizeof buf, "%.0f", v);
    return buf;
  }
  return number_text(v);
}

std::string range_text(const SettingInfo& s) {
  const bool has_min = std::isfinite(s.min), has_max = std::isfinite(s.max);
  const bool integral = s.type == SettingType::kInteger ||
                        (s.type == SettingType::kList && s.item_type == SettingType::kInteger);
  const std::string what = integral ? "integer" : "number";
  // Integer ranges that are only the type's own limits are not worth printing.
  const bool min_shown = has_min && !(integral && s.min <= -2147483648.0);
  const bool max_shown = has_max && !(integral && s.max >= 2147483647.0);
  if (min_shown && max_shown)
    return what + " in " + (s.min_exclusive ? "(" : "[") + bound_text(s, s.min) + ", " +
           bound_text(s, s.max) + (s.max_exclusive ? ")" : "]");
  if (min_shown) return what + (s.min_exclusive ? " > " : " >= ") + bound_text(s, s.min);
  if (max_shown) return what + (s.max_exclusive ? " < " : " <= ") + bound_text(s, s.max);
  return what;
}

[[noreturn]] void out_of_range(const SettingInfo& s, const std::string& shown) {
  throw ConfigError(s.key, shown + " is out of range: expected " + range_text(s) +
                               (s.note.empty() ? "" : " (" + s.note + ")"));
}

void check_number(const SettingInfo& s, double v, const std::string& shown) {
  if (!std::isfinite(v)) throw ConfigError(s.key, shown + " is not a finite number");
  const bool low = s.min_exclusive ? !(v > s.min) : !(v >= s.min);
  const bool high = s.max_exclusive ? !(v < s.max) : !(v <= s.max);
  if (low || high) out_of_range(s, shown);
}

std::vector<std::string> choice_names(const SettingInfo& s) {
  std::vector<std::string> names;
  for (const auto& c : s.choices) names.push_back(c.name);
  return names;
}

std::string join_names(const SettingInfo& s, const char* sep) {
  std::string out;
  for (const auto& c : s.choices) out += (out.empty() ? "" : sep) + c.name;
  return out;
}

json check_item(const SettingInfo& s, SettingType type, const json& v) {
  switch (type) {
    case SettingType::kFlag:
      if (!v.is_boolean()) throw ConfigError(s.key, "expected true or false, got " + v.dump());
      return v;
    case SettingType::kAutoFlag:
      if (v.is_boolean() || v == "auto") return v;
      throw ConfigError(s.key, "expected true, false or \"auto\", got " + v.dump());
    case SettingType::kInteger: {
      if (!v.is_number_integer()) throw ConfigError(s.key, "expected " + range_text(s) + ", got " + v.dump());
      const double d = v.is_number_unsigned() ? static_cast<double>(v.get<std::uint64_t>())
                                              : static_cast<double>(v.get<std::int64_t>());
      check_number(s, d, v.dump());
      return v;
    }
    case SettingType::kReal: {
      if (!v.is_number()) throw ConfigError(s.key, "expected " + range_text(s) + ", got " + v.dump());
      check_number(s, v.get<double>(), v.dump());
      return json(v.get<double>());
    }
    case SettingType::kText:
      if (!v.is_string()) throw ConfigError(s.key, "expected a string, got " + v.dump());
      return v;
    case SettingType::kChoice: {
      if (!v.is_string())
        throw ConfigError(s.key, "expected one of " + join_names(s, ", ") + " (a string), got " + v.dump());
      const auto name = v.get<std::string>();
      for (const auto& c : s.choices)
        if (c.name == name) return v;
      throw ConfigError(
          s.key, "'" + name + "' is not one of " + join_names(s, ", ") + did_you_mean(name, choice_names(s)));
    }
    case SettingType::kList:
      break;
  }
  throw ConfigError(s.key, "lists are given on the command line only");
}

json parse_item(const SettingInfo& s, SettingType type, std::string_view text) {
  const std::string shown = "'" + std::string(text) + "'";
  switch (type) {
    case SettingType::kFlag:
    case SettingType::kAutoFlag:
      if (text == "true" || text == "on") return true;
      if (text == "false" || text == "off") return false;
      if (type == SettingType::kAutoFlag && text == "auto") return "auto";
      throw ConfigError(s.key, shown + " is not on or off");
    case SettingType::kInteger: {
      const char* first = text.data();
      const char* last = text.data() + text.size();
      json v;
      std::from_chars_result r{};
      if (!text.empty() && text[0] == '-') {
        long long x = 0;
        r = std::from_chars(first, last, x);
        v = x;
      } else {
        unsigned long long x = 0;
        r = std::from_chars(first + (!text.empty() && text[0] == '+'), last, x);
        v = x;
      }
      if (text.empty() || r.ec == std::errc::invalid_argument || r.ptr != last)
        throw ConfigError(s.key, shown + " is not a whole number (expected " + range_text(s) + ")");
      if (r.ec == std::errc::result_out_of_range) out_of_range(s, shown);
      return check_item(s, type, v);
    }
    case SettingType::kReal: {
      const std::string copy(text);
      char* end = nullptr;
      const double v = copy.empty() ? 0.0 : std::strtod(copy.c_str(), &end);
      // strtod also reads "nan", "inf" and hexadecimal: only plain decimal numbers are settings.
      const bool plain = !copy.empty() && copy.find_first_not_of("0123456789.eE+-") == std::string::npos;
      if (copy.empty() || end != copy.c_str() + copy.size() || !plain)
        throw ConfigError(s.key, shown + " is not a number (expected " + range_text(s) + ")");
      check_number(s, v, shown);
      return json(v);
    }
    case SettingType::kText:
      return std::string(text);
    case SettingType::kChoice:
      return check_item(s, type, std::string(text));
    case SettingType::kList:
      break;
  }
  throw ConfigError(s.key, "nested lists are not supported");
}

}  // namespace

std::string value_text(const json& value) {
  if (value.is_string()) return value.get<std::string>();
  if (value.is_number_float()) return number_text(value.get<double>());
  return value.dump();
}

std::string dashed(std::string_view key) {
  std::string out(key);
  for (char& c : out)
    if (c == '_') c = '-';
  return out;
}

std::string SettingInfo::option() const {
  return positional ? key : "--" + dashed(key);
}

std::string SettingInfo::negative_option() const {
  if (type != SettingType::kFlag && type != SettingType::kAutoFlag) return "";
  return "--" + (negative.empty() ? "no-" + dashed(key) : negative);
}

std::string SettingInfo::placeholder() const {
  if (!value_name.empty()) return value_name;
  switch (type) {
    case SettingType::kFlag:
    case SettingType::kAutoFlag:
      return "";
    case SettingType::kInteger:
      return "N";
    case SettingType::kReal:
      return "X";
    case SettingType::kText:
      return "TEXT";
    case SettingType::kChoice:
      return join_names(*this, "|");
    case SettingType::kList:
      return item_type == SettingType::kInteger ? "N[,N...]" : "X[,X...]";
  }
  return "";
}

std::string SettingInfo::allowed_text() const {
  switch (type) {
    case SettingType::kFlag:
      return "flag";
    case SettingType::kAutoFlag:
      return "flag (default decided by the data)";
    case SettingType::kInteger:
    case SettingType::kReal:
      return range_text(*this) + (note.empty() ? "" : "; " + note);
    case SettingType::kText:
      return note.empty() ? "text" : note;
    case SettingType::kChoice:
      return join_names(*this, " | ");
    case SettingType::kList:
      return "comma-separated, each " + range_text(*this) + (note.empty() ? "" : "; " + note);
  }
  return "";
}

std::string SettingInfo::default_text() const {
  const json& d = default_value;
  if (d.is_null()) return "";
  if (d.is_boolean()) return d.get<bool>() ? "on" : "off";
  if (d.is_string()) return d.get<std::string>();
  if (d.is_number_float()) return number_text(d.get<double>());
  if (d.is_array()) {
    std::string out;
    for (const auto& e : d)
      out += (out.empty() ? "" : ",") + (e.is_string() ? e.get<std::string>() : e.dump());
    return out;
  }
  return d.dump();
}

json check_setting_value(const SettingInfo& s, const json& value) {
  if (value.is_null()) throw ConfigError(s.key, "null is not a value");
  if (s.type != SettingType::kList) return check_item(s, s.type, value);
  if (!value.is_array()) throw ConfigError(s.key, "expected a list, got " + value.dump());
  if (value.empty()) throw ConfigError(s.key, "give at least one value");
  for (const auto& e : value) check_item(s, s.item_type, e);
  return value;
}

json parse_setting_text(const SettingInfo& s, std::string_view text) {
  if (s.type != SettingType::kList) return parse_item(s, s.type, text);
  json out = json::array();
  std::size_t start = 0;
  while (true) {
    const std::size_t comma = text.find(',', start);
    std::string_view item = text.substr(start, comma == std::string_view::npos ? text.npos : comma - start);
    while (!item.empty() && item.front() == ' ') item.remove_prefix(1);
    while (!item.empty() && item.back() == ' ') item.remove_suffix(1);
    if (item.empty()) throw ConfigError(s.key, "empty item in '" + std::string(text) + "'");
    out.push_back(parse_item(s, s.item_type, item));
    if (comma == std::string_view::npos) break;
    start = comma + 1;
  }
  return out;
}

namespace {

// Line (1-based) of the n-th (0-based) occurrence of "key" used as an object key in JSON text.
std::size_t key_line(const std::string& text, const std::string& key, int n) {
  std::size_t line = 1;
  for (std::size_t i = 0; i < text.size(); ++i) {
    if (text[i] == '\n') ++line;
    if (text[i] != '"') continue;
    std::string s;
    std::size_t j = i + 1;
    for (; j < text.size() && text[j] != '"'; ++j) {
      if (text[j] == '\\' && j + 1 < text.size()) s += text[j++];
      s += text[j];
    }
    std::size_t k = j + 1;
    while (k < text.size() && (text[k] == ' ' || text[k] == '\t' || text[k] == '\r' || text[k] == '\n')) ++k;
    if (k < text.size() && text[k] == ':' && s == key && n-- == 0) return line;
    for (std::size_t q = i + 1; q < j && q < text.size(); ++q)
      if (text[q] == '\n') ++line;
    i = j;
  }
  return 0;
}

}  // namespace

std::size_t settings_key_line(const std::string& path, const std::string& key) {
  try {
    return key_line(read_file(path), key, 0);
  } catch (const Error&) {
    return 0;
  }
}

json read_settings_file(const std::string& path) {
  const std::string text = read_file(path);
  std::vector<std::set<std::string>> open;  // keys seen per open object
  std::string duplicate;
  int earlier = 0;
  const json::parser_callback_t watch = [&](int, json::parse_event_t event, json& parsed) {
    if (event == json::parse_event_t::object_start) {
      open.emplace_back();
    } else if (event == json::parse_event_t::object_end) {
      if (!open.empty()) open.pop_back();
    } else if (event == json::parse_event_t::key && !open.empty() && duplicate.empty()) {
      const auto key = parsed.get<std::string>();
      if (!open.back().insert(key).second) duplicate = key;
    }
    return true;
  };
  json j;
  try {
    j = json::parse(text, watch);
  } catch (const json::parse_error& e) {
    throw ParseError(path, 0, std::string("not valid JSON: ") + e.what());
  }
  if (!duplicate.empty()) {
    const std::size_t first = key_line(text, duplicate, earlier), second = key_line(text, duplicate, 1);
    throw ParseError(path, second,
                     "key \"" + duplicate + "\" is given twice (first on line " + std::to_string(first) +
                         "); which one was meant is unclear");
  }
  if (!j.is_object()) throw ParseError(path, 0, "expected a JSON object of settings");
  return j;
}

}  // namespace gyre::train
