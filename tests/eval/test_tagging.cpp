#include <catch2/catch.hpp>

#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/eval/span_metrics.hpp"
#include "gyre/eval/tag_baseline.hpp"
#include "gyre/eval/tag_scheme.hpp"

using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;
using gyre::eval::Span;
using gyre::eval::TagScheme;
using Tags = std::vector<std::string>;

// Span reading follows the chunk rules of the CoNLL-2000 shared-task evaluation script
// (Tjong Kim Sang & Buchholz 2000): a span starts at B-/S-, at I-/E- after O, E-, S- or the
// sentence start, and at any change of type; it ends before O, B-, S- or a change of type, and
// after E- and S-. Every expected span list below was worked out by hand from those rules.
TEST_CASE("span extraction follows the CoNLL-2000 chunk rules", "[eval]") {
  using V = std::vector<Span>;
  SECTION("valid BIO") {
    REQUIRE(gyre::eval::extract_spans(Tags{"B-x", "I-x", "O", "B-y"}) == V{{"x", 0, 2}, {"y", 3, 4}});
    REQUIRE(gyre::eval::extract_spans(Tags{"B-x", "B-x", "I-x"}) == V{{"x", 0, 1}, {"x", 1, 3}});
    REQUIRE(gyre::eval::extract_spans(Tags{"O", "O"}).empty());
    REQUIRE(gyre::eval::extract_spans(Tags{}).empty());
  }
  SECTION("invalid BIO: I- after O or the start opens a span") {
    REQUIRE(gyre::eval::extract_spans(Tags{"O", "I-x", "I-x", "O"}) == V{{"x", 1, 3}});
    REQUIRE(gyre::eval::extract_spans(Tags{"I-x"}) == V{{"x", 0, 1}});
    REQUIRE(gyre::eval::extract_spans(Tags{"I-x", "B-x"}) == V{{"x", 0, 1}, {"x", 1, 2}});
  }
  SECTION("invalid BIO: a change of type splits") {
    REQUIRE(gyre::eval::extract_spans(Tags{"B-x", "I-y"}) == V{{"x", 0, 1}, {"y", 1, 2}});
    REQUIRE(gyre::eval::extract_spans(Tags{"B-x", "I-x", "I-y", "I-y"}) == V{{"x", 0, 2}, {"y", 2, 4}});
  }
  SECTION("BIOES") {
    REQUIRE(gyre::eval::extract_spans(Tags{"S-x", "B-y", "I-y", "E-y", "O"}) == V{{"x", 0, 1}, {"y", 1, 4}});
    REQUIRE(gyre::eval::extract_spans(Tags{"B-x", "S-x"}) == V{{"x", 0, 1}, {"x", 1, 2}});
    // E- closes its span: a second E- opens a new one.
    REQUIRE(gyre::eval::extract_spans(Tags{"B-x", "E-x", "E-x"}) == V{{"x", 0, 2}, {"x", 2, 3}});
    // An unfinished span ends before O and at the sentence end.
    REQUIRE(gyre::eval::extract_spans(Tags{"B-x", "I-x", "O", "B-y"}) == V{{"x", 0, 2}, {"y", 3, 4}});
    REQUIRE(gyre::eval::extract_spans(Tags{"E-x"}) == V{{"x", 0, 1}});
  }
  SECTION("malformed tags throw with the position") {
    REQUIRE_THROWS_WITH(gyre::eval::extract_spans(Tags{"O", "B-"}), Contains("position 1"));
    REQUIRE_THROWS_WITH(gyre::eval::extract_spans(Tags{"X-y"}), Contains("malformed tag 'X-y'"));
    REQUIRE_THROWS_AS(gyre::eval::extract_spans(Tags{"b-x"}), gyre::Error);
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
TEST_CASE("span metrics on a hand-counted example", "[eval]") {
  gyre::eval::TaggingScorer scorer;
  scorer.add(Tags{"B-app", "I-app", "O", "B-date", "O"}, Tags{"B-app", "I-app", "O", "B-date", "I-date"});
  scorer.add(Tags{"O", "B-part", "O", "O"}, Tags{"O", "I-part", "O", "B-time"});
  scorer.add(Tags{"B-app", "B-app", "O"}, Tags{"B-app", "I-app", "O"});
  const auto m = scorer.metrics();
  REQUIRE(m.sentences == 3);
  REQUIRE(m.tokens == 12);
  REQUIRE(m.correct_tokens == 8);
  REQUIRE_THAT(m.token_accuracy, WithinAbs(8.0 / 12.0, 1e-12));
  REQUIRE(m.gold_spans == 5);
  REQUIRE(m.predicted_spans == 5);
  REQUIRE(m.correct_spans == 2);
  REQUIRE_THAT(m.micro.precision, WithinAbs(0.4, 1e-12));
  REQUIRE_THAT(m.micro.recall, WithinAbs(0.4, 1e-12));
  REQUIRE_THAT(m.micro.f1, WithinAbs(0.4, 1e-12));
  REQUIRE(m.types.size() == 4);
  REQUIRE(m.types[0].type == "app");  // sorted by name
  REQUIRE(m.types[0].gold == 3);
  REQUIRE(m.types[0].predicted == 2);
  REQUIRE(m.types[0].correct == 1);
  REQUIRE_THAT(m.types[0].precision, WithinAbs(0.5, 1e-12));
  REQUIRE_THAT(m.types[0].recall, WithinAbs(1.0 / 3.0, 1e-12));
  REQUIRE_THAT(m.types[0].f1, WithinAbs(0.4, 1e-12));
  REQUIRE(m.types[1].type == "date");
  REQUIRE(m.types[1].f1 == 0.0);
  REQUIRE(m.types[2].type == "part");
  REQUIRE_THAT(m.types[2].f1, WithinAbs(1.0, 1e-12));
  REQUIRE(m.types[3].type == "time");
  REQUIRE(m.types[3].gold == 0);
  REQUIRE(m.types[3].recall == 0.0);  // zero division -> 0
  REQUIRE_THAT(m.macro.f1, WithinAbs(0.35, 1e-12));

  const auto j = m.to_json();
  REQUIRE(j["spans"]["correct"].get<int>() == 2);
  REQUIRE_THAT(j["micro"]["f1"].get<double>(), WithinAbs(0.4, 1e-12));
  REQUIRE(j["types"].size() == 4);
  const std::string table = m.to_table();
  REQUIRE_THAT(table, Contains("all spans pooled"));
  REQUIRE_THAT(table, Contains("0.4000"));
}

TEST_CASE("span metrics: BIOES corpus and corpus-level helper", "[eval]") {
  // Hand-counted: gold S-x B-y E-y | B-x I-x E-x ; pred S-x B-y I-y | B-x E-x O
  // gold spans x[0,1) y[1,3) | x[0,3); pred x[0,1) y[1,3) (unfinished span ends at the sentence
  // end) | x[0,2). Correct: x[0,1), y[1,3) -> 2 of 3 gold, 2 of 3 predicted.
  const std::vector<Tags> gold{{"S-x", "B-y", "E-y"}, {"B-x", "I-x", "E-x"}};
  const std::vector<Tags> pred{{"S-x", "B-y", "I-y"}, {"B-x", "E-x", "O"}};
  const auto m = gyre::eval::tagging_metrics(gold, pred);
  REQUIRE(m.correct_spans == 2);
  REQUIRE_THAT(m.micro.f1, WithinAbs(2.0 / 3.0, 1e-12));
  REQUIRE(m.correct_tokens == 3);
}

TEST_CASE("span scorer refuses mismatched or malformed sentences", "[eval]") {
  gyre::eval::TaggingScorer scorer;
  REQUIRE_THROWS_WITH(scorer.add(Tags{"O", "O"}, Tags{"O"}), Contains("sentence 0"));
  REQUIRE_THROWS_WITH(scorer.add(Tags{"O", "B-x"}, Tags{"O", "Bx"}), Contains("predicted position 1"));
}

TEST_CASE("tag validation reports invalid transitions with positions", "[eval]") {
  SECTION("BIO") {
    const auto issues = gyre::eval::check_tags(Tags{"O", "I-x", "B-y", "I-z", "E-x", "I-y"}, TagScheme::bio);
    REQUIRE(issues.size() == 4);
    REQUIRE(issues[0].position == 1);
    REQUIRE_THAT(issues[0].message, Contains("I-x follows O"));
    REQUIRE(issues[1].position == 3);
    REQUIRE_THAT(issues[1].message, Contains("I-z follows B-y"));
    REQUIRE(issues[2].position == 4);
    REQUIRE_THAT(issues[2].message, Contains("not a BIO tag"));
    REQUIRE(issues[3].position == 5);  // after a bad tag the sequence reads as if restarted
    REQUIRE_THAT(issues[3].message, Contains("sentence start"));
    REQUIRE(gyre::eval::check_tags(Tags{"B-x", "I-x", "O", "B-y", "B-y", "I-y"}, TagScheme::bio).empty());
  }
  SECTION("BIOES") {
    REQUIRE(gyre::eval::check_tags(Tags{"S-x", "B-y", "I-y", "E-y", "O"}, TagScheme::bioes).empty());
    auto issues = gyre::eval::check_tags(Tags{"B-x", "O"}, TagScheme::bioes);
    REQUIRE(issues.size() == 1);
    REQUIRE(issues[0].position == 1);
    REQUIRE_THAT(issues[0].message, Contains("E-x"));
    issues = gyre::eval::check_tags(Tags{"O", "B-x"}, TagScheme::bioes);
    REQUIRE(issues.size() == 1);
    REQUIRE(issues[0].position == 1);
    REQUIRE_THAT(issues[0].message, Contains("ends on B-x"));
    issues = gyre::eval::check_tags(Tags{"S-x", "E-x", "Q"}, TagScheme::bioes);
    REQUIRE(issues.size() == 2);
    REQUIRE(issues[0].position == 1);
    REQUIRE(issues[1].position == 2);
    REQUIRE_THAT(issues[1].message, Contains("malformed"));
  }
}

TEST_CASE("repair and conversion keep the spans and give valid sequences", "[eval]") {
  SECTION("worked examples of the repair rule") {
    REQUIRE(gyre::eval::repair_tags(Tags{"O", "I-x", "I-x", "B-y", "I-z"}, TagScheme::bio) ==
            Tags{"O", "B-x", "I-x", "B-y", "B-z"});
    REQUIRE(gyre::eval::repair_tags(Tags{"B-x", "I-x", "O", "B-y"}, TagScheme::bioes) ==
            Tags{"B-x", "E-x", "O", "S-y"});
  }
  SECTION("conversion") {
    const Tags bio{"B-x", "I-x", "I-x", "O", "B-y", "B-y", "I-y"};
    const Tags bioes{"B-x", "I-x", "E-x", "O", "S-y", "B-y", "E-y"};
    REQUIRE(gyre::eval::convert_tags(bio, TagScheme::bioes) == bioes);
    REQUIRE(gyre::eval::convert_tags(bioes, TagScheme::bio) == bio);
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
      const auto spans = gyre::eval::extract_spans(tags);
      for (const TagScheme scheme : {TagScheme::bio, TagScheme::bioes}) {
        const Tags fixed = gyre::eval::repair_tags(tags, scheme);
        INFO("trial " << trial);
        REQUIRE(gyre::eval::check_tags(fixed, scheme).empty());
        REQUIRE(gyre::eval::extract_spans(fixed) == spans);
        // A valid sequence is left unchanged by repair.
        REQUIRE(gyre::eval::repair_tags(fixed, scheme) == fixed);
      }
      const Tags bio = gyre::eval::repair_tags(tags, TagScheme::bio);
      REQUIRE(gyre::eval::convert_tags(gyre::eval::convert_tags(bio, TagScheme::bioes), TagScheme::bio) ==
              bio);
    }
  }
  SECTION("encode_spans refuses overlaps") {
    const std::vector<Span> bad{{"x", 0, 2}, {"y", 1, 3}};
    REQUIRE_THROWS_AS(gyre::eval::encode_spans(bad, 4, TagScheme::bio), gyre::Error);
  }
}

TEST_CASE("transition rules for constrained decoding", "[eval]") {
  const Tags bio{"O", "B-x", "I-x", "B-y", "I-y"};
  const auto r = gyre::eval::transition_rules(bio, TagScheme::bio);
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
  const auto q = gyre::eval::transition_rules(bioes, TagScheme::bioes);
  for (std::size_t j = 0; j < bioes.size(); ++j) {
    const bool alone_ok = gyre::eval::check_tags(Tags{bioes[j]}, TagScheme::bioes).empty();
    REQUIRE(alone_ok == (q.start[j] == 1 && q.end[j] == 1));
    for (std::size_t i = 0; i < bioes.size(); ++i) {
      // Embed the pair between tags that are always fine around it: "S-y" is a valid start for
      // i when start[i], and "E-z"/"O" issues are filtered by position.
      const auto issues = gyre::eval::check_tags(Tags{bioes[i], bioes[j]}, TagScheme::bioes);
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
  REQUIRE_THROWS_AS(gyre::eval::transition_rules(Tags{"O", "S-x"}, TagScheme::bio), gyre::Error);
  REQUIRE(gyre::eval::parse_tag_scheme("BIOES") == TagScheme::bioes);
  REQUIRE(gyre::eval::infer_tag_scheme(bio) == TagScheme::bio);
  REQUIRE(gyre::eval::infer_tag_scheme(bioes) == TagScheme::bioes);
  REQUIRE_THROWS_WITH(gyre::eval::infer_tag_scheme(Tags{"O", "B_x"}), Contains("'B_x'"));
  REQUIRE_THROWS_AS(gyre::eval::parse_tag_scheme("iob"), gyre::ConfigError);
}

TEST_CASE("most-frequent-tag baseline", "[eval]") {
  gyre::eval::MostFrequentTagBaseline base;
  REQUIRE_THROWS_AS(base.predict(Tags{"a"}), gyre::Error);
  // Counts: "fix" B-act x2, O x1; "kettle" B-app x1, I-app x1 (tie -> "B-app" sorts first);
  // "the" O x3. Overall: O 4, B-act 2, B-app 1, I-app 1 -> unknown tokens get O.
  base.add(Tags{"fix", "the", "kettle"}, Tags{"B-act", "O", "B-app"});
  base.add(Tags{"fix", "the", "kettle"}, Tags{"B-act", "O", "I-app"});
  base.add(Tags{"fix", "the"}, Tags{"O", "O"});
  base.finalize();
  REQUIRE(base.known_tokens() == 3);
  REQUIRE(base.default_tag() == "O");
  REQUIRE(base.predict(Tags{"fix", "the", "kettle", "toaster"}) == Tags{"B-act", "O", "B-app", "O"});
  REQUIRE_THROWS_AS(base.add(Tags{"a"}, Tags{}), gyre::Error);
  gyre::eval::MostFrequentTagBaseline empty;
  REQUIRE_THROWS_AS(empty.finalize(), gyre::Error);
}
