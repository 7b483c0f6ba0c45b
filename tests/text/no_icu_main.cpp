// The runtime tokenizer built without ICU (as with -DGYRE_RUNTIME_ICU=OFF), in C++17: the
// `whitespace` mode without normalization works; everything that needs ICU is refused clearly.
// Run by ctest as "text:runtime tokenizer without ICU" (tests/text/extra.cmake).

#include <cstdio>
#include <string>
#include <vector>

#include "gyre/runtime/tokenizer.hpp"

using namespace gyre::runtime;

namespace {
int failures = 0;
void check(bool ok, const char* what) {
  if (!ok) {
    std::printf("FAILED: %s\n", what);
    ++failures;
  }
}
void check_refused(TokenizerSettings s, const char* what) {
  try {
    Tokenizer t(s);
    check(false, what);
  } catch (const Error& e) {
    check(std::string(e.what()).find("needs ICU") != std::string::npos, what);
  }
}
}  // namespace

int main() {
  check(!tokenizer_has_icu(), "built without ICU");
  TokenizerSettings s;
  s.mode = TokenizerMode::kWhitespace;
  s.nfkc = false;
  s.case_fold = false;
  const Tokenizer t(s);
  // U+00A0 NO-BREAK SPACE is White_Space (PropList.txt).
  check(t.tokenize(" Ab\xC2\xA0"
                   "c,  d ") == std::vector<std::string>{"Ab", "c,", "d"},
        "whitespace split");
  check(t.normalize("Ab") == "Ab", "no normalization");
  try {
    t.tokenize("\xC0\x80");
    check(false, "invalid UTF-8 refused");
  } catch (const Error&) {
  }
  check_refused(TokenizerSettings{}, "words mode refused");
  TokenizerSettings c = s;
  c.mode = TokenizerMode::kChars;
  check_refused(c, "chars mode refused");
  c = s;
  c.nfkc = true;
  check_refused(c, "NFKC refused");
  c = s;
  c.case_fold = true;
  check_refused(c, "case folding refused");
  c = s;
  c.fold_digits = true;
  check_refused(c, "digit folding refused");
  c = s;
  c.keep_punctuation = false;
  check_refused(c, "dropping punctuation refused");
  std::printf("%s\n", failures == 0 ? "all checks passed" : "some checks failed");
  return failures == 0 ? 0 : 1;
}
