#include "gyre/runtime/tokenizer.hpp"

#include <cstdint>
#include <cstring>
#include <limits>
#include <memory>
#include <string>

#include "runtime/detail/segment.hpp"

#ifdef GYRE_RUNTIME_HAS_ICU
#include <unicode/brkiter.h>
#include <unicode/bytestream.h>
#include <unicode/casemap.h>
#include <unicode/edits.h>
#include <unicode/locid.h>
#include <unicode/normalizer2.h>
#include <unicode/uchar.h>
#include <unicode/utext.h>
#endif

namespace gyre::runtime {

namespace {

// Decodes the code point at s[i] of well-formed UTF-8 and advances i past it.
inline char32_t next_code_point(std::string_view s, std::size_t& i) {
  const auto c = static_cast<unsigned char>(s[i]);
  auto cont = [&](std::size_t k) {
    return static_cast<char32_t>(static_cast<unsigned char>(s[i + k]) & 0x3F);
  };
  char32_t cp;
  if (c < 0x80) {
    cp = c;
    i += 1;
  } else if (c < 0xE0) {
    cp = (static_cast<char32_t>(c & 0x1F) << 6) | cont(1);
    i += 2;
  } else if (c < 0xF0) {
    cp = (static_cast<char32_t>(c & 0x0F) << 12) | (cont(1) << 6) | cont(2);
    i += 3;
  } else {
    cp = (static_cast<char32_t>(c & 0x07) << 18) | (cont(1) << 12) | (cont(2) << 6) | cont(3);
    i += 4;
  }
  return cp;
}

void check_utf8(std::string_view utf8) {
  const std::size_t bad = first_invalid_utf8(utf8);
  if (bad != std::string_view::npos)
    throw Error("invalid UTF-8 at byte " + std::to_string(bad + 1) + " of the text");
  // ICU takes int32_t lengths.
  if (utf8.size() > static_cast<std::size_t>(std::numeric_limits<std::int32_t>::max() / 4))
    throw Error("text of " + std::to_string(utf8.size()) + " bytes is too long to tokenize (limit 512 MiB)");
}

[[maybe_unused]] bool is_ascii(std::string_view s) noexcept {
  std::size_t i = 0;
  const std::size_t n = s.size();
  for (; i + 8 <= n; i += 8) {
    std::uint64_t word;
    std::memcpy(&word, s.data() + i, 8);
    if (word & 0x8080808080808080ULL) return false;
  }
  for (; i < n; ++i)
    if (static_cast<unsigned char>(s[i]) >= 0x80) return false;
  return true;
}

bool is_punctuation(char32_t c) noexcept {
#ifdef GYRE_RUNTIME_HAS_ICU
  return u_ispunct(static_cast<UChar32>(c)) != 0;  // General_Category P*
#else
  (void)c;
  return false;  // unreachable: keep_punctuation=false is refused without ICU
#endif
}

enum class SegmentClass { kWhitespace, kPunctuation, kOther };

// Whitespace: every code point White_Space; punctuation: every code point P*.
SegmentClass classify(std::string_view seg) noexcept {
  bool all_space = true, all_punct = true;
  for (std::size_t i = 0; i < seg.size();) {
    const auto c0 = static_cast<unsigned char>(seg[i]);
    if ((c0 >= 'a' && c0 <= 'z') || (c0 >= 'A' && c0 <= 'Z') || (c0 >= '0' && c0 <= '9'))
      return SegmentClass::kOther;
    const char32_t cp = next_code_point(seg, i);
    all_space = all_space && detail::is_white_space(cp);
    all_punct = all_punct && is_punctuation(cp);
    if (!all_space && !all_punct) return SegmentClass::kOther;
  }
  if (seg.empty()) return SegmentClass::kOther;
  return all_space ? SegmentClass::kWhitespace : SegmentClass::kPunctuation;
}

// Appends tokens to out while reusing the strings already in it (their capacity survives), and
// when asked their byte ranges in the segmented (normalized) text. Once max_tokens are out, the
// next token offered marks the text as cut and is refused, so the segmenters stop one token past
// the limit.
class Emitter {
 public:
  Emitter(std::vector<std::string>& out, std::size_t max_tokens, std::vector<ByteRange>* ranges)
      : out_(out), max_(max_tokens), ranges_(ranges) {
    if (ranges_) ranges_->clear();
  }
  bool full() const noexcept { return max_ != 0 && count_ >= max_; }
  bool cut() const noexcept { return cut_; }
  void mark_cut() noexcept { cut_ = true; }
  std::size_t count() const noexcept { return count_; }
  /// Appends token, which is bytes [begin, end) of the segmented text; returns false (and records
  /// the cut) when the limit was already reached.
  bool offer(std::string_view token, std::size_t begin, std::size_t end) {
    if (full()) {
      cut_ = true;
      return false;
    }
    if (count_ < out_.size()) {
      out_[count_].assign(token.data(), token.size());
    } else if (auto& spare = spare_slots(); !spare.empty()) {
      out_.push_back(std::move(spare.back()));  // a slot with its buffer from an earlier, longer text
      spare.pop_back();
      out_.back().assign(token.data(), token.size());
    } else {
      out_.emplace_back(token);
    }
    if (ranges_) ranges_->push_back({begin, end});
    ++count_;
    return true;
  }
  /// Drops the slots past the last token, keeping their buffers (tokens over the small-string size
  /// live on the heap) for the next text on this thread, so a shorter text followed by a longer
  /// one allocates nothing once the longest text has been seen.
  void finish() {
    auto& spare = spare_slots();
    for (std::size_t i = count_; i < out_.size(); ++i)
      if (out_[i].capacity() > std::string().capacity()) spare.push_back(std::move(out_[i]));
    out_.resize(count_);
  }
  bool wants_ranges() const noexcept { return ranges_ != nullptr; }

 private:
  // Token strings with heap buffers, parked by finish() (per thread: tokenize() may run on many).
  static std::vector<std::string>& spare_slots() {
    thread_local std::vector<std::string> spare;
    return spare;
  }
  std::vector<std::string>& out_;
  std::size_t max_;
  std::vector<ByteRange>* ranges_;
  std::size_t count_ = 0;
  bool cut_ = false;
};

void split_whitespace(std::string_view text, bool keep_punctuation, Emitter& emit) {
  std::size_t start = 0, i = 0;
  // False once the emitter refused a token (the text is cut).
  auto flush = [&](std::size_t end) {
    if (end > start) {
      const std::string_view token = text.substr(start, end - start);
      if (keep_punctuation || classify(token) != SegmentClass::kPunctuation)
        return emit.offer(token, start, end);
    }
    return true;
  };
  while (i < text.size()) {
    const std::size_t at = i;
    const char32_t cp = next_code_point(text, i);
    if (detail::is_white_space(cp)) {
      if (!flush(at)) return;
      start = i;
    }
  }
  flush(text.size());
}

#ifdef GYRE_RUNTIME_HAS_ICU

void check_icu(UErrorCode status, const char* what) {
  if (U_FAILURE(status)) throw Error(std::string("ICU failed in ") + what + ": " + u_errorName(status));
}

// ICU objects are not thread-safe (break iterators) or are costly to create, so each thread
// keeps its own set, shared by every Tokenizer (they do not depend on the settings).
struct IcuState {
  std::unique_ptr<icu::BreakIterator> word, grapheme;
  UText text = UTEXT_INITIALIZER;
  std::string buffers[2];
  // Edits of one normalization step, and the composition of the steps so far (input -> result).
  icu::Edits step, composed[2];
  IcuState() = default;
  IcuState(const IcuState&) = delete;
  IcuState& operator=(const IcuState&) = delete;
  ~IcuState() { utext_close(&text); }

  icu::BreakIterator& iterator(detail::BreakKind kind) {
    auto& slot = kind == detail::BreakKind::kWord ? word : grapheme;
    if (!slot) {
      UErrorCode status = U_ZERO_ERROR;
      slot.reset(kind == detail::BreakKind::kWord
                     ? icu::BreakIterator::createWordInstance(icu::Locale::getRoot(), status)
                     : icu::BreakIterator::createCharacterInstance(icu::Locale::getRoot(), status));
      if (U_FAILURE(status)) slot.reset();
      check_icu(status, "creating a break iterator");
    }
    return *slot;
  }

  // Points the iterator at text (which must outlive the iteration); boundaries are byte offsets.
  icu::BreakIterator& attach(detail::BreakKind kind, std::string_view utf8) {
    icu::BreakIterator& it = iterator(kind);
    UErrorCode status = U_ZERO_ERROR;
    utext_openUTF8(&text, utf8.data(), static_cast<std::int64_t>(utf8.size()), &status);
    check_icu(status, "opening text");
    it.setText(&text, status);
    check_icu(status, "setting break iterator text");
    return it;
  }
};

IcuState& icu_state() {
  thread_local IcuState state;
  return state;
}

const icu::Normalizer2& nfkc_instance() {
  UErrorCode status = U_ZERO_ERROR;
  const icu::Normalizer2* n = icu::Normalizer2::getNFKCInstance(status);
  check_icu(status, "loading NFKC data");
  return *n;
}

// Calls fn(begin, end) for each segment (byte offsets) of utf8 until fn returns false.
template <typename Fn>
void for_each_segment(IcuState& state, detail::BreakKind kind, std::string_view utf8, Fn&& fn) {
  icu::BreakIterator& it = state.attach(kind, utf8);
  std::int32_t start = it.first();
  for (std::int32_t end = it.next(); end != icu::BreakIterator::DONE; start = end, end = it.next())
    if (!fn(static_cast<std::size_t>(start), static_cast<std::size_t>(end))) break;
}

// Every decimal digit (Nd) -> '0', from in to out; edits (when given) records the length changes.
void fold_digits_into(std::string_view in, std::string& out, icu::Edits* edits) {
  out.reserve(in.size());
  if (edits) edits->reset();
  std::size_t unchanged = 0;
  for (std::size_t i = 0; i < in.size();) {
    const auto c = static_cast<unsigned char>(in[i]);
    if (c < 0x80) {
      out.push_back(c >= '0' && c <= '9' ? '0' : static_cast<char>(c));
      ++i;
      ++unchanged;
      continue;
    }
    const std::size_t at = i;
    const char32_t cp = next_code_point(in, i);
    if (u_charType(static_cast<UChar32>(cp)) == U_DECIMAL_DIGIT_NUMBER) {
      out.push_back('0');
      if (edits) {
        edits->addUnchanged(static_cast<std::int32_t>(unchanged));
        edits->addReplace(static_cast<std::int32_t>(i - at), 1);
        unchanged = 0;
      }
    } else {
      out.append(in.data() + at, i - at);
      unchanged += i - at;
    }
  }
  if (edits) edits->addUnchanged(static_cast<std::int32_t>(unchanged));
}

// How byte offsets of the normalized text lead back to the input: the identity, or ICU edits
// (fine granularity: every changed character or NFKC segment is its own edit).
struct OffsetMap {
  const icu::Edits* edits = nullptr;  // nullptr: identity
};

// NFKC, case fold, digit fold into the thread's buffers; returns a view of the result (valid
// until the next call on this thread). Input must be well-formed UTF-8. With map, also records
// where each byte of the result came from (state.composed holds the edits).
std::string_view normalize_view(std::string_view in, const TokenizerSettings& settings, IcuState& state,
                                OffsetMap* map = nullptr) {
  std::string_view cur = in;
  if (map) map->edits = nullptr;
  int composed_next = 0;
  // Folds state.step (cur before -> cur after the step just made) into the composition.
  auto record_step = [&] {
    if (!map) return;
    if (!map->edits) {
      state.composed[composed_next] = state.step;
    } else {
      icu::Edits& merged = state.composed[composed_next];
      merged.reset();
      UErrorCode status = U_ZERO_ERROR;
      merged.mergeAndAppend(*map->edits, state.step, status);
      check_icu(status, "mapping offsets through normalization");
    }
    map->edits = &state.composed[composed_next];
    composed_next ^= 1;
  };
  // ASCII is invariant under NFKC (UAX #15: every ASCII character is its own decomposition and
  // no composition starts from ASCII alone), and full case folding maps exactly A-Z to a-z in
  // ASCII (CaseFolding.txt), so ASCII-only text takes these shortcuts with identical results.
  const bool ascii = is_ascii(in);
  int next = 0;
  auto target = [&]() -> std::string& {
    std::string& t = state.buffers[next];
    next ^= 1;
    t.clear();
    return t;
  };
  if (settings.nfkc && !ascii) {
    std::string& t = target();
    icu::StringByteSink<std::string> sink(&t, static_cast<std::int32_t>(cur.size()));
    UErrorCode status = U_ZERO_ERROR;
    nfkc_instance().normalizeUTF8(0, icu::StringPiece(cur.data(), static_cast<std::int32_t>(cur.size())),
                                  sink, map ? &state.step : nullptr, status);
    check_icu(status, "NFKC normalization");
    cur = t;
    record_step();
  }
  if (settings.case_fold) {
    std::string& t = target();
    if (ascii) {
      t.assign(cur.data(), cur.size());
      for (char& c : t)
        if (c >= 'A' && c <= 'Z') c = static_cast<char>(c + ('a' - 'A'));
    } else {
      icu::StringByteSink<std::string> sink(&t, static_cast<std::int32_t>(cur.size()));
      UErrorCode status = U_ZERO_ERROR;
      icu::CaseMap::utf8Fold(U_FOLD_CASE_DEFAULT,
                             icu::StringPiece(cur.data(), static_cast<std::int32_t>(cur.size())), sink,
                             map ? &state.step : nullptr, status);
      check_icu(status, "case folding");
      cur = t;
      record_step();
    }
    // ASCII folds byte for byte: offsets are unchanged.
    cur = t;
  }
  if (settings.fold_digits) {
    std::string& t = target();
    // Only a multi-byte digit changes the length; ASCII digits fold in place.
    const bool track = map && !ascii;
    fold_digits_into(cur, t, track ? &state.step : nullptr);
    cur = t;
    if (track) record_step();
  }
  return cur;
}

// Turns ranges of the normalized text into ranges of the input. A range edge inside a changed
// piece widens to the whole piece (begin to its start, end to its end).
void map_to_input(const OffsetMap& map, std::vector<ByteRange>& ranges) {
  if (!map.edits || ranges.empty()) return;
  icu::Edits::Iterator it = map.edits->getFineIterator();
  UErrorCode status = U_ZERO_ERROR;
  auto find = [&](std::size_t dest) {
    if (!it.findDestinationIndex(static_cast<std::int32_t>(dest), status) || U_FAILURE(status))
      throw Error("internal error: offset " + std::to_string(dest) + " lies outside the normalized text");
  };
  for (ByteRange& r : ranges) {
    find(r.begin);  // tokens are ascending, so the iterator only moves forward
    const auto src = static_cast<std::size_t>(it.sourceIndex());
    const auto dst = static_cast<std::size_t>(it.destinationIndex());
    const std::size_t begin = it.hasChange() ? src : src + (r.begin - dst);
    find(r.end - 1);  // the edit holding the token's last byte
    const auto src_e = static_cast<std::size_t>(it.sourceIndex());
    const auto dst_e = static_cast<std::size_t>(it.destinationIndex());
    r.end = it.hasChange() ? src_e + static_cast<std::size_t>(it.oldLength()) : src_e + (r.end - dst_e);
    r.begin = begin;
  }
}

#endif  // GYRE_RUNTIME_HAS_ICU

}  // namespace

const char* to_string(TokenizerMode mode) {
  switch (mode) {
    case TokenizerMode::kWords:
      return "words";
    case TokenizerMode::kChars:
      return "chars";
    case TokenizerMode::kWhitespace:
      return "whitespace";
  }
  return "?";
}

TokenizerMode tokenizer_mode_from_string(std::string_view name) {
  if (name == "words") return TokenizerMode::kWords;
  if (name == "chars") return TokenizerMode::kChars;
  if (name == "whitespace") return TokenizerMode::kWhitespace;
  throw Error("unknown tokenizer mode '" + std::string(name) + "' (expected words, chars or whitespace)");
}

bool tokenizer_has_icu() noexcept {
#ifdef GYRE_RUNTIME_HAS_ICU
  return true;
#else
  return false;
#endif
}

Tokenizer::Tokenizer(const TokenizerSettings& settings) : settings_(settings) {
#ifdef GYRE_RUNTIME_HAS_ICU
  if (settings_.nfkc) (void)nfkc_instance();  // fail now, not at the first text
#else
  const char* needs = nullptr;
  if (settings_.mode != TokenizerMode::kWhitespace)
    needs = settings_.mode == TokenizerMode::kWords ? "tokenizer mode 'words'" : "tokenizer mode 'chars'";
  else if (settings_.nfkc)
    needs = "NFKC normalization";
  else if (settings_.case_fold)
    needs = "case folding";
  else if (settings_.fold_digits)
    needs = "digit folding";
  else if (!settings_.keep_punctuation)
    needs = "dropping punctuation";
  if (needs)
    throw Error(std::string(needs) +
                " needs ICU, but this runtime was built without it (GYRE_RUNTIME_ICU=OFF)");
#endif
}

std::string Tokenizer::normalize(std::string_view utf8) const {
  check_utf8(utf8);
#ifdef GYRE_RUNTIME_HAS_ICU
  return std::string(normalize_view(utf8, settings_, icu_state()));
#else
  return std::string(utf8);  // the constructor allows no normalization without ICU
#endif
}

bool Tokenizer::tokenize(std::string_view utf8, std::vector<std::string>& out) const {
  return tokenize_into(utf8, out, nullptr);
}

bool Tokenizer::tokenize(std::string_view utf8, std::vector<std::string>& out,
                         std::vector<ByteRange>& ranges) const {
  return tokenize_into(utf8, out, &ranges);
}

bool Tokenizer::tokenize_into(std::string_view utf8, std::vector<std::string>& out,
                              std::vector<ByteRange>* ranges) const {
  Emitter emit(out, settings_.max_tokens, ranges);
  try {
    check_utf8(utf8);
#ifdef GYRE_RUNTIME_HAS_ICU
    IcuState& state = icu_state();
    OffsetMap map;
    const std::string_view text = normalize_view(utf8, settings_, state, ranges ? &map : nullptr);
    const bool keep_punct = settings_.keep_punctuation;
    switch (settings_.mode) {
      case TokenizerMode::kWords:
        for_each_segment(state, detail::BreakKind::kWord, text, [&](std::size_t begin, std::size_t end) {
          const std::string_view seg = text.substr(begin, end - begin);
          const SegmentClass cls = classify(seg);
          if (cls == SegmentClass::kWhitespace || (cls == SegmentClass::kPunctuation && !keep_punct))
            return true;
          return emit.offer(seg, begin, end);
        });
        break;
      case TokenizerMode::kChars: {
        bool pending_space = false;
        std::size_t space_begin = 0, space_end = 0;  // the whitespace run the " " token stands for
        for_each_segment(state, detail::BreakKind::kGrapheme, text, [&](std::size_t begin, std::size_t end) {
          const std::string_view seg = text.substr(begin, end - begin);
          const SegmentClass cls = classify(seg);
          if (cls == SegmentClass::kWhitespace) {
            if (!pending_space) space_begin = begin;
            space_end = end;
            pending_space = pending_space || emit.count() > 0;
            return true;
          }
          if (cls == SegmentClass::kPunctuation && !keep_punct) return true;
          if (pending_space) {
            // A space needs a cluster after it: stop rather than end the tokens with " ".
            if (settings_.max_tokens != 0 && emit.count() + 2 > settings_.max_tokens) {
              emit.mark_cut();
              return false;
            }
            emit.offer(" ", space_begin, space_end);
            pending_space = false;
          }
          return emit.offer(seg, begin, end);
        });
        break;
      }
      case TokenizerMode::kWhitespace:
        split_whitespace(text, keep_punct, emit);
        break;
    }
    if (ranges) map_to_input(map, *ranges);
#else
    split_whitespace(utf8, settings_.keep_punctuation, emit);  // no normalization: offsets are the input's
#endif
  } catch (...) {
    out.clear();
    if (ranges) ranges->clear();
    throw;
  }
  emit.finish();
  return emit.cut();
}

std::vector<std::string> Tokenizer::tokenize(std::string_view utf8) const {
  std::vector<std::string> out;
  tokenize(utf8, out);
  return out;
}

namespace detail {

std::vector<std::size_t> break_boundaries(std::string_view utf8, BreakKind kind) {
  check_utf8(utf8);
#ifdef GYRE_RUNTIME_HAS_ICU
  std::vector<std::size_t> out;
  if (utf8.empty()) return out;
  out.push_back(0);
  for_each_segment(icu_state(), kind, utf8, [&](std::size_t, std::size_t end) {
    out.push_back(end);
    return true;
  });
  return out;
#else
  (void)kind;
  throw Error("break iteration needs ICU, but this runtime was built without it (GYRE_RUNTIME_ICU=OFF)");
#endif
}

}  // namespace detail

}  // namespace gyre::runtime
