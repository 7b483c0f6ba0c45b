// Tag schemes (BIO, BIOES): span reading with the CoNLL-2000 chunk rules, validation, repair,
// conversion and the transition rules of constrained CRF decoding.

#include <catch2/catch.hpp>

#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/data/tag_scheme.hpp"

using Catch::Matchers::Contains;
using gyre::data::TagScheme;
using gyre::data::TypedSpan;
using Tags = std::vector<std::string>;

// Span reading follows the chunk rules of the CoNLL-2000 shared-task evaluation script
// (Tjong Kim Sang & Buchholz 2000): a span starts at B-/S-, at I-/E- after O, E-, S- or the
// sentence start, and at any change of type; it ends before O, B-, S- or a change of type, and
// after E- and S-. Every expected span list below was worked out by hand from those rules.
TEST_CASE("span extraction follows the CoNLL-2000 chunk rules", "[data]") {
  using V = std::vector<TypedSpan>;
  SECTION("valid BIO") {
    REQUIRE(gyre::data::extract_spans(Tags{"B-x", "I-x", "O", "B-y"}) == V{{"x", 0, 2}, {"y", 3, 4}});
    REQUIRE(gyre::data::extract_spans(Tags{"B-x", "B-x", "I-x"}) == V{{"x", 0, 1}, {"x", 1, 3}});
    REQUIRE(gyre::data::extract_spans(Tags{"O", "O"}).empty());
    REQUIRE(gyre::data::extract_spans(Tags{}).empty());
  }
  SECTION("invalid BIO: I- after O or the start opens a span") {
    REQUIRE(gyre::data::extract_spans(Tags{"O", "I-x", "I-x", "O"}) == V{{"x", 1, 3}});
    REQUIRE(gyre::data::extract_spans(Tags{"I-x"}) == V{{"x", 0, 1}});
    REQUIRE(gyre::data::extract_spans(Tags{"I-x", "B-x"}) == V{{"x", 0, 1}, {"x", 1, 2}});
  }
  SECTION("invalid BIO: a change of type splits") {
    REQUIRE(gyre::data::extract_spans(Tags{"B-x", "I-y"}) == V{{"x", 0, 1}, {"y", 1, 2}});
    REQUIRE(gyre::data::extract_spans(Tags{"B-x", "I-x", "I-y", "I-y"}) == V{{"x", 0, 2}, {"y", 2, 4}});
  }
  SECTION("BIOES") {
    REQUIRE(gyre::data::extract_spans(Tags{"S-x", "B-y", "I-y", "E-y", "O"}) == V{{"x", 0, 1}, {"y", 1, 4}});
    REQUIRE(gyre::data::extract_spans(Tags{"B-x", "S-x"}) == V{{"x", 0, 1}, {"x", 1, 2}});
    // E- closes its span: a second E- opens a new one.
    REQUIRE(gyre::data::extract_spans(Tags{"B-x", "E-x", "E-x"}) == V{{"x", 0, 2}, {"x", 2, 3}});
    // An unfinished span ends before O and at the sentence end.
    REQUIRE(gyre::data::extract_spans(Tags{"B-x", "I-x", "O", "B-y"}) == V{{"x", 0, 2}, {"y", 3, 4}});
    REQUIRE(gyre::data::extract_spans(Tags{"E-x"}) == V{{"x", 0, 1}});
  }
  SECTION("malformed tags throw with the position") {
    REQUIRE_THROWS_WITH(gyre::data::extract_spans(Tags{"O", "B-"}), Contains("position 1"));
    REQUIRE_THROWS_WITH(gyre::data::extract_spans(Tags{"X-y"}), Contains("malformed tag 'X-y'"));
    REQUIRE_THROWS_AS(gyre::data::extract_spans(Tags{"b-x"}), gyre::Error);
  }
}

// Worked example, counted by hand. A span counts only with the same type and the same first and
// last token (CoNLL-2000 shared-task convention).
//  sentence 1 gold B-app I-app O B-date O     -> app[0,2) date[3,4)
//             pred B-app I-app O B-date I-date -> app[0,2) date[3,5)   app right, date wrong end
//  sentence 2 gold O B-part O O               -> part[1,2)
//             pred O I-part O B-time          -> part[1,2) time[3,4)   part right (I- after O
//                                                                      opens a span), time spurious
//  sentence 3 gold B-app B-app O              -> app[0,1) app[1,2)
//             pred B-app I-app O              -> app[0,2)              no match
//  counts (gold/pred/correct): app 3/2/1, date 1/1/0, part 1/1/1, time 0/1/0; all 5/5/2
//  micro P = R = F1 = 2/5; app P 1/2 R 1/3 F1 0.4; macro F1 = (0.4 + 0 + 1 + 0)/4 = 0.35
//  tokens: 4 of 5, 2 of 4, 2 of 3 equal -> 8/12
TEST_CASE("tag validation reports invalid transitions with positions", "[data]") {
  SECTION("BIO") {
    const auto issues = gyre::data::check_tags(Tags{"O", "I-x", "B-y", "I-z", "E-x", "I-y"}, TagScheme::kBio);
    REQUIRE(issues.size() == 4);
    REQUIRE(issues[0].position == 1);
    REQUIRE_THAT(issues[0].message, Contains("I-x follows O"));
    REQUIRE(issues[1].position == 3);
    REQUIRE_THAT(issues[1].message, Contains("I-z follows B-y"));
    REQUIRE(issues[2].position == 4);
    REQUIRE_THAT(issues[2].message, Contains("not a BIO tag"));
    REQUIRE(issues[3].position == 5);  // after a bad tag the sequence reads as if restarted
    REQUIRE_THAT(issues[3].message, Contains("sentence start"));
    REQUIRE(gyre::data::check_tags(Tags{"B-x", "I-x", "O", "B-y", "B-y", "I-y"}, TagScheme::kBio).empty());
  }
  SECTION("BIOES") {
    REQUIRE(gyre::data::check_tags(Tags{"S-x", "B-y", "I-y", "E-y", "O"}, TagScheme::kBioes).empty());
    auto issues = gyre::data::check_tags(Tags{"B-x", "O"}, TagScheme::kBioes);
    REQUIRE(issues.size() == 1);
    REQUIRE(issues[0].position == 1);
    REQUIRE_THAT(issues[0].message, Contains("E-x"));
    issues = gyre::data::check_tags(Tags{"O", "B-x"}, TagScheme::kBioes);
    REQUIRE(issues.size() == 1);
    REQUIRE(issues[0].position == 1);
    REQUIRE_THAT(issues[0].message, Contains("ends on B-x"));
    issues = gyre::data::check_tags(Tags{"S-x", "E-x", "Q"}, TagScheme::kBioes);
    REQUIRE(issues.size() == 2);
    REQUIRE(issues[0].position == 1);
    REQUIRE(issues[1].position == 2);
    REQUIRE_THAT(issues[1].message, Contains("malformed"));
  }
}

TEST_CASE("repair and conversion keep the spans and give valid sequences", "[data]") {
  SECTION("worked examples of the repair rule") {
    REQUIRE(gyre::data::repair_tags(Tags{"O", "I-x", "I-x", "B-y", "I-z"}, TagScheme::kBio) ==
            Tags{"O", "B-x", "I-x", "B-y", "B-z"});
    REQUIRE(gyre::data::repair_tags(Tags{"B-x", "I-x", "O", "B-y"}, TagScheme::kBioes) ==
            Tags{"B-x", "E-x", "O", "S-y"});
  }
  SECTION("conversion") {
    const Tags bio{"B-x", "I-x", "I-x", "O", "B-y", "B-y", "I-y"};
    const Tags bioes{"B-x", "I-x", "E-x", "O", "S-y", "B-y", "E-y"};
    REQUIRE(gyre::data::convert_tags(bio, TagScheme::kBioes) == bioes);
    REQUIRE(gyre::data::convert_tags(bioes, TagScheme::kBio) == bio);
  }
  SECTION("random sequences (seeded)") {
    const std::uint64_t seed = 20261201;
    INFO("seed " << seed);
    gyre::Rng rng(seed);
    const Tags alphabet{"O", "B-x", "I-x", "E-x", "S-x", "B-y", "I-y", "E-y", "S-y"};
    for (int trial = 0; trial < 500; ++trial) {
      const std::size_t len = 1 + static_cast<std::size_t>(rng.below(8));
      Tags tags(len);
      for (auto& t : tags) t = alphabet[static_cast<std::size_t>(rng.below(alphabet.size()))];
      const auto spans = gyre::data::extract_spans(tags);
      for (const TagScheme scheme : {TagScheme::kBio, TagScheme::kBioes}) {
        const Tags fixed = gyre::data::repair_tags(tags, scheme);
        INFO("trial " << trial);
        REQUIRE(gyre::data::check_tags(fixed, scheme).empty());
        REQUIRE(gyre::data::extract_spans(fixed) == spans);
        // A valid sequence is left unchanged by repair.
        REQUIRE(gyre::data::repair_tags(fixed, scheme) == fixed);
      }
      const Tags bio = gyre::data::repair_tags(tags, TagScheme::kBio);
      REQUIRE(gyre::data::convert_tags(gyre::data::convert_tags(bio, TagScheme::kBioes), TagScheme::kBio) ==
              bio);
    }
  }
  SECTION("encode_spans refuses overlaps") {
    const std::vector<TypedSpan> bad{{"x", 0, 2}, {"y", 1, 3}};
    REQUIRE_THROWS_AS(gyre::data::encode_spans(bad, 4, TagScheme::kBio), gyre::Error);
  }
}

TEST_CASE("transition rules for constrained decoding", "[data]") {
  const Tags bio{"O", "B-x", "I-x", "B-y", "I-y"};
  const auto r = gyre::data::transition_rules(bio, TagScheme::kBio);
  REQUIRE(r.num_tags == 5);
  auto allowed = [&](std::size_t i, std::size_t j) { return r.allowed[i * r.num_tags + j] == 1; };
  REQUIRE_FALSE(allowed(0, 2));  // O -> I-x
  REQUIRE(allowed(1, 2));        // B-x -> I-x
  REQUIRE(allowed(2, 2));        // I-x -> I-x
  REQUIRE_FALSE(allowed(3, 2));  // B-y -> I-x
  REQUIRE(allowed(2, 3));        // I-x -> B-y
  REQUIRE(r.start == std::vector<std::uint8_t>{1, 1, 0, 1, 0});
  REQUIRE(r.end == std::vector<std::uint8_t>{1, 1, 1, 1, 1});

  // BIOES: the rules agree with check_tags on every pair and every single tag.
  const Tags bioes{"O", "B-x", "I-x", "E-x", "S-x", "B-y", "E-y"};
  const auto q = gyre::data::transition_rules(bioes, TagScheme::kBioes);
  for (std::size_t j = 0; j < bioes.size(); ++j) {
    const bool alone_ok = gyre::data::check_tags(Tags{bioes[j]}, TagScheme::kBioes).empty();
    REQUIRE(alone_ok == (q.start[j] == 1 && q.end[j] == 1));
    for (std::size_t i = 0; i < bioes.size(); ++i) {
      // Embed the pair between tags that are always fine around it: "S-y" is a valid start for
      // i when start[i], and "E-z"/"O" issues are filtered by position.
      const auto issues = gyre::data::check_tags(Tags{bioes[i], bioes[j]}, TagScheme::kBioes);
      bool pair_issue = false;
      for (const auto& issue : issues)
        if (issue.position == 1 && issue.message.find("sentence ends") == std::string::npos)
          pair_issue = true;
      INFO(bioes[i] << " -> " << bioes[j]);
      REQUIRE(pair_issue == (q.allowed[i * bioes.size() + j] == 0));
    }
  }
  REQUIRE_FALSE(q.end[1]);  // B-x cannot end a sentence
  REQUIRE(q.end[4]);
  REQUIRE_FALSE(q.start[3]);  // E-x cannot start one
  REQUIRE_THROWS_AS(gyre::data::transition_rules(Tags{"O", "S-x"}, TagScheme::kBio), gyre::Error);
  REQUIRE(gyre::data::parse_tag_scheme("BIOES") == TagScheme::kBioes);
  REQUIRE(gyre::data::infer_tag_scheme(bio) == TagScheme::kBio);
  REQUIRE(gyre::data::infer_tag_scheme(bioes) == TagScheme::kBioes);
  REQUIRE_THROWS_WITH(gyre::data::infer_tag_scheme(Tags{"O", "B_x"}), Contains("'B_x'"));
  REQUIRE_THROWS_AS(gyre::data::parse_tag_scheme("iob"), gyre::ConfigError);
}
