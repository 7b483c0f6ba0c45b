#include <catch2/catch.hpp>

#include <nlohmann/json.hpp>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/core/rng.hpp"
#include "gyre/eval/span_metrics.hpp"
#include "gyre/eval/tag_baseline.hpp"

using Catch::Matchers::Contains;
using Catch::Matchers::WithinAbs;
using Tags = std::vector<std::string>;

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
