#include "runtime/detail/json.hpp"

#include <charconv>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <string>

#include "gyre/runtime/error.hpp"

namespace gyre::runtime::detail {

Json Json::boolean(bool b) {
  Json j;
  j.type_ = Type::kBool;
  j.bool_ = b;
  return j;
}
Json Json::number(double d) {
  if (!std::isfinite(d)) throw Error("JSON: a number must be finite");
  Json j;
  j.type_ = Type::kNumber;
  j.number_ = d;
  return j;
}
Json Json::string(std::string s) {
  Json j;
  j.type_ = Type::kString;
  j.string_ = std::move(s);
  return j;
}
Json Json::array() {
  Json j;
  j.type_ = Type::kArray;
  return j;
}
Json Json::object() {
  Json j;
  j.type_ = Type::kObject;
  return j;
}

const Json* Json::find(std::string_view key) const {
  if (type_ != Type::kObject) return nullptr;
  for (std::size_t i = 0; i < keys_.size(); ++i)
    if (keys_[i] == key) return &items_[i];
  return nullptr;
}

Json& Json::push_back(Json value) {
  if (type_ != Type::kArray) throw Error("JSON: push_back on a non-array");
  items_.push_back(std::move(value));
  return items_.back();
}

Json& Json::set(std::string key, Json value) {
  if (type_ != Type::kObject) throw Error("JSON: set on a non-object");
  if (find(key) != nullptr) throw Error("JSON: duplicate key \"" + key + "\"");
  keys_.push_back(std::move(key));
  items_.push_back(std::move(value));
  return items_.back();
}

void json_escape(std::string_view s, std::string& out) {
  static const char* const kHex = "0123456789abcdef";
  out.push_back('"');
  for (char ch : s) {
    const auto c = static_cast<unsigned char>(ch);
    switch (c) {
      case '"':
        out += "\\\"";
        break;
      case '\\':
        out += "\\\\";
        break;
      case '\n':
        out += "\\n";
        break;
      case '\r':
        out += "\\r";
        break;
      case '\t':
        out += "\\t";
        break;
      case '\b':
        out += "\\b";
        break;
      case '\f':
        out += "\\f";
        break;
      default:
        if (c < 0x20) {
          out += "\\u00";
          out.push_back(kHex[c >> 4]);
          out.push_back(kHex[c & 15]);
        } else {
          out.push_back(ch);
        }
    }
  }
  out.push_back('"');
}

void Json::dump_to(std::string& out) const {
  switch (type_) {
    case Type::kNull:
      out += "null";
      break;
    case Type::kBool:
      out += bool_ ? "true" : "false";
      break;
    case Type::kNumber: {
      char buf[64];
      std::to_chars_result r{};
      if (number_ == std::floor(number_) && std::fabs(number_) < 9.0e15) {
        r = std::to_chars(buf, buf + sizeof buf, static_cast<long long>(number_));
      } else {
        r = std::to_chars(buf, buf + sizeof buf, number_);  // shortest round-trip form
      }
      out.append(buf, r.ptr);
      break;
    }
    case Type::kString:
      json_escape(string_, out);
      break;
    case Type::kArray:
      out.push_back('[');
      for (std::size_t i = 0; i < items_.size(); ++i) {
        if (i) out.push_back(',');
        items_[i].dump_to(out);
      }
      out.push_back(']');
      break;
    case Type::kObject:
      out.push_back('{');
      for (std::size_t i = 0; i < items_.size(); ++i) {
        if (i) out.push_back(',');
        json_escape(keys_[i], out);
        out.push_back(':');
        items_[i].dump_to(out);
      }
      out.push_back('}');
      break;
  }
}

std::string Json::dump() const {
  std::string out;
  dump_to(out);
  return out;
}

class JsonParser {
 public:
  JsonParser(std::string_view text, std::string_view what) : text_(text), what_(what) {}

  Json parse_document() {
    skip_ws();
    Json v = parse_value(0);
    skip_ws();
    if (pos_ != text_.size()) fail("unexpected characters after the JSON value");
    return v;
  }

 private:
  [[noreturn]] void fail(const std::string& msg) const {
    std::size_t line = 1, col = 1;
    for (std::size_t i = 0; i < pos_ && i < text_.size(); ++i) {
      if (text_[i] == '\n') {
        ++line;
        col = 1;
      } else {
        ++col;
      }
    }
    throw Error(std::string(what_) + ": line " + std::to_string(line) + ", column " + std::to_string(col) +
                ": " + msg);
  }

  void skip_ws() {
    while (pos_ < text_.size()) {
      const char c = text_[pos_];
      if (c == ' ' || c == '\t' || c == '\n' || c == '\r') {
        ++pos_;
      } else {
        break;
      }
    }
  }

  bool consume(std::string_view word) {
    if (text_.substr(pos_, word.size()) == word) {
      pos_ += word.size();
      return true;
    }
    return false;
  }

  Json parse_value(int depth) {
    if (depth >= Json::kMaxDepth) fail("nesting deeper than " + std::to_string(Json::kMaxDepth) + " levels");
    if (pos_ >= text_.size()) fail("unexpected end of input, expected a value");
    const char c = text_[pos_];
    switch (c) {
      case '{':
        return parse_object(depth);
      case '[':
        return parse_array(depth);
      case '"':
        return Json::string(parse_string());
      case 't':
        if (consume("true")) return Json::boolean(true);
        break;
      case 'f':
        if (consume("false")) return Json::boolean(false);
        break;
      case 'n':
        if (consume("null")) return Json::null();
        break;
      default:
        if (c == '-' || (c >= '0' && c <= '9')) return parse_number();
        break;
    }
    fail(std::string("unexpected character '") + printable(c) + "', expected a value");
  }

  static std::string printable(char c) {
    const auto u = static_cast<unsigned char>(c);
    if (u >= 0x20 && u < 0x7f) return std::string(1, c);
    char buf[8];
    std::snprintf(buf, sizeof buf, "\\x%02x", u);
    return buf;
  }

  Json parse_object(int depth) {
    ++pos_;  // '{'
    Json obj = Json::object();
    skip_ws();
    if (pos_ < text_.size() && text_[pos_] == '}') {
      ++pos_;
      return obj;
    }
    for (;;) {
      skip_ws();
      if (pos_ >= text_.size() || text_[pos_] != '"') fail("expected a string key in object");
      const std::size_t key_pos = pos_;
      std::string key = parse_string();
      if (obj.find(key) != nullptr) {
        pos_ = key_pos;
        fail("duplicate key \"" + key + "\"");
      }
      skip_ws();
      if (pos_ >= text_.size() || text_[pos_] != ':') fail("expected ':' after object key");
      ++pos_;
      skip_ws();
      Json value = parse_value(depth + 1);
      obj.keys_.push_back(std::move(key));
      obj.items_.push_back(std::move(value));
      skip_ws();
      if (pos_ >= text_.size()) fail("unexpected end of input in object");
      if (text_[pos_] == ',') {
        ++pos_;
        continue;
      }
      if (text_[pos_] == '}') {
        ++pos_;
        return obj;
      }
      fail("expected ',' or '}' in object");
    }
  }

  Json parse_array(int depth) {
    ++pos_;  // '['
    Json arr = Json::array();
    skip_ws();
    if (pos_ < text_.size() && text_[pos_] == ']') {
      ++pos_;
      return arr;
    }
    for (;;) {
      skip_ws();
      arr.items_.push_back(parse_value(depth + 1));
      skip_ws();
      if (pos_ >= text_.size()) fail("unexpected end of input in array");
      if (text_[pos_] == ',') {
        ++pos_;
        continue;
      }
      if (text_[pos_] == ']') {
        ++pos_;
        return arr;
      }
      fail("expected ',' or ']' in array");
    }
  }

  static void append_utf8(std::string& out, std::uint32_t cp) {
    if (cp < 0x80) {
      out.push_back(static_cast<char>(cp));
    } else if (cp < 0x800) {
      out.push_back(static_cast<char>(0xC0 | (cp >> 6)));
      out.push_back(static_cast<char>(0x80 | (cp & 0x3F)));
    } else if (cp < 0x10000) {
      out.push_back(static_cast<char>(0xE0 | (cp >> 12)));
      out.push_back(static_cast<char>(0x80 | ((cp >> 6) & 0x3F)));
      out.push_back(static_cast<char>(0x80 | (cp & 0x3F)));
    } else {
      out.push_back(static_cast<char>(0xF0 | (cp >> 18)));
      out.push_back(static_cast<char>(0x80 | ((cp >> 12) & 0x3F)));
      out.push_back(static_cast<char>(0x80 | ((cp >> 6) & 0x3F)));
      out.push_back(static_cast<char>(0x80 | (cp & 0x3F)));
    }
  }

  std::uint32_t parse_hex4() {
    if (pos_ + 4 > text_.size()) fail("truncated \\u escape");
    std::uint32_t v = 0;
    for (int i = 0; i < 4; ++i) {
      const char c = text_[pos_++];
      v <<= 4;
      if (c >= '0' && c <= '9') {
        v |= static_cast<std::uint32_t>(c - '0');
      } else if (c >= 'a' && c <= 'f') {
        v |= static_cast<std::uint32_t>(c - 'a' + 10);
      } else if (c >= 'A' && c <= 'F') {
        v |= static_cast<std::uint32_t>(c - 'A' + 10);
      } else {
        --pos_;
        fail("invalid hex digit in \\u escape");
      }
    }
    return v;
  }

  // Length of the well-formed UTF-8 sequence at pos_ (RFC 3629 table 3-7), or 0.
  std::size_t utf8_length() const {
    const auto* s = reinterpret_cast<const unsigned char*>(text_.data()) + pos_;
    const std::size_t left = text_.size() - pos_;
    const unsigned char c = s[0];
    auto cont = [&](std::size_t i, unsigned char lo = 0x80, unsigned char hi = 0xBF) {
      return i < left && s[i] >= lo && s[i] <= hi;
    };
    if (c < 0x80) return 1;
    if (c >= 0xC2 && c <= 0xDF) return cont(1) ? 2 : 0;
    if (c == 0xE0) return cont(1, 0xA0) && cont(2) ? 3 : 0;
    if ((c >= 0xE1 && c <= 0xEC) || c == 0xEE || c == 0xEF) return cont(1) && cont(2) ? 3 : 0;
    if (c == 0xED) return cont(1, 0x80, 0x9F) && cont(2) ? 3 : 0;
    if (c == 0xF0) return cont(1, 0x90) && cont(2) && cont(3) ? 4 : 0;
    if (c >= 0xF1 && c <= 0xF3) return cont(1) && cont(2) && cont(3) ? 4 : 0;
    if (c == 0xF4) return cont(1, 0x80, 0x8F) && cont(2) && cont(3) ? 4 : 0;
    return 0;
  }

  std::string parse_string() {
    ++pos_;  // opening quote
    std::string out;
    for (;;) {
      if (pos_ >= text_.size()) fail("unterminated string");
      const char c = text_[pos_];
      if (c == '"') {
        ++pos_;
        return out;
      }
      if (static_cast<unsigned char>(c) < 0x20) fail("control character in string (must be escaped)");
      if (c == '\\') {
        ++pos_;
        if (pos_ >= text_.size()) fail("unterminated escape");
        const char e = text_[pos_++];
        switch (e) {
          case '"':
            out.push_back('"');
            break;
          case '\\':
            out.push_back('\\');
            break;
          case '/':
            out.push_back('/');
            break;
          case 'b':
            out.push_back('\b');
            break;
          case 'f':
            out.push_back('\f');
            break;
          case 'n':
            out.push_back('\n');
            break;
          case 'r':
            out.push_back('\r');
            break;
          case 't':
            out.push_back('\t');
            break;
          case 'u': {
            std::uint32_t cp = parse_hex4();
            if (cp >= 0xD800 && cp <= 0xDBFF) {
              if (!consume("\\u")) fail("high surrogate not followed by a low surrogate");
              const std::uint32_t lo = parse_hex4();
              if (lo < 0xDC00 || lo > 0xDFFF) fail("high surrogate not followed by a low surrogate");
              cp = 0x10000 + ((cp - 0xD800) << 10) + (lo - 0xDC00);
            } else if (cp >= 0xDC00 && cp <= 0xDFFF) {
              fail("unpaired low surrogate");
            }
            append_utf8(out, cp);
            break;
          }
          default:
            --pos_;
            fail(std::string("invalid escape '\\") + printable(e) + "'");
        }
        continue;
      }
      const std::size_t n = utf8_length();
      if (n == 0) fail("invalid UTF-8 in string");
      out.append(text_.data() + pos_, n);
      pos_ += n;
    }
  }

  Json parse_number() {
    const std::size_t start = pos_;
    auto digit = [&] { return pos_ < text_.size() && text_[pos_] >= '0' && text_[pos_] <= '9'; };
    if (text_[pos_] == '-') ++pos_;
    if (!digit()) fail("invalid number");
    if (text_[pos_] == '0') {
      ++pos_;
      if (digit()) fail("leading zeros are not allowed in numbers");
    } else {
      while (digit()) ++pos_;
    }
    if (pos_ < text_.size() && text_[pos_] == '.') {
      ++pos_;
      if (!digit()) fail("expected a digit after '.'");
      while (digit()) ++pos_;
    }
    if (pos_ < text_.size() && (text_[pos_] == 'e' || text_[pos_] == 'E')) {
      ++pos_;
      if (pos_ < text_.size() && (text_[pos_] == '+' || text_[pos_] == '-')) ++pos_;
      if (!digit()) fail("expected a digit in the exponent");
      while (digit()) ++pos_;
    }
    double value = 0.0;
    const auto r = std::from_chars(text_.data() + start, text_.data() + pos_, value);  // locale-free
    if (r.ec != std::errc() || !std::isfinite(value)) {
      pos_ = start;
      fail("number out of range");
    }
    return Json::number(value);
  }

  std::string_view text_;
  std::string_view what_;
  std::size_t pos_ = 0;
};

Json Json::parse(std::string_view text, std::string_view what) {
  return JsonParser(text, what).parse_document();
}

}  // namespace gyre::runtime::detail
