#include <catch2/catch.hpp>

#include <algorithm>
#include <cmath>
#include <fstream>
#include <map>
#include <nlohmann/json.hpp>
#include <random>
#include <set>
#include <sstream>
#include <string>
#include <vector>

#include "gyre/core/error.hpp"
#include "gyre/eval/linear_baseline.hpp"

using Catch::Matchers::WithinAbs;
using gyre::eval::LbfgsOptions;
using gyre::eval::SparseRows;

namespace {

nlohmann::json load_fixture() {
  std::ifstream in(std::string(GYRE_FIXTURES_DIR) + "/baseline/logreg.json");
  REQUIRE(in.good());
  std::stringstream s;
  s << in.rdbuf();
  return nlohmann::json::parse(s.str());
}

SparseRows rows_of(const nlohmann::json& c) {
  SparseRows x;
  x.row_start = c["row_start"].get<std::vector<std::size_t>>();
  x.columns = c["columns"].get<std::vector<std::int32_t>>();
  x.values = c["values"].get<std::vector<double>>();
  return x;
}

}  // namespace

// ref: tests/fixtures/baseline/logreg.json, made by tools/make_baseline_fixtures.py with
// python3-sklearn's LogisticRegression(solver="lbfgs", tol=1e-10) on seeded random sparse data.
TEST_CASE("L-BFGS logistic regression reaches sklearn's optimum", "[baseline]") {
  const auto fixture = load_fixture();
  for (const char* name : {"multiclass", "binary", "weak_penalty"}) {
    INFO("case " << name);
    const auto& c = fixture["cases"][name];
    const auto x = rows_of(c);
    const auto labels = c["labels"].get<std::vector<std::int32_t>>();
    const int classes = c["classes"].get<int>();
    const int features = c["features"].get<int>();
    LbfgsOptions options;
    options.c = c["c"].get<double>();
    options.gradient_tolerance = 1e-9;
    const auto model = gyre::eval::fit_logistic_regression(x, labels, classes, features, options);
    CHECK(model.converged);
    const auto coef = c["coef"];
    const auto intercept = c["intercept"].get<std::vector<double>>();
    if (classes == 2) {
      // sklearn's one vector w = w_1 - w_0 (see linear_baseline.hpp).
      for (int j = 0; j < features; ++j) {
        const double w = model.weights[static_cast<std::size_t>(j) * 2 + 1] -
                         model.weights[static_cast<std::size_t>(j) * 2];
        CHECK_THAT(w, WithinAbs(coef[0][static_cast<std::size_t>(j)].get<double>(), 1e-3));
      }
      CHECK_THAT(model.bias[1] - model.bias[0], WithinAbs(intercept[0], 1e-3));
    } else {
      for (int k = 0; k < classes; ++k) {
        for (int j = 0; j < features; ++j)
          CHECK_THAT(
              model.weights[static_cast<std::size_t>(j * classes + k)],
              WithinAbs(coef[static_cast<std::size_t>(k)][static_cast<std::size_t>(j)].get<double>(), 1e-3));
        CHECK_THAT(model.bias[static_cast<std::size_t>(k)],
                   WithinAbs(intercept[static_cast<std::size_t>(k)], 1e-3));
      }
    }
    // The penalised loss (the softmax form's equals sklearn's, also for two classes) is at
    // least as low as sklearn's: sklearn stops on a relative decrease of 64 eps, so its
    // coefficients sit up to ~5e-4 from the optimum in the flat weak-penalty case; hence the
    // 1e-3 on coefficients and the tight check on the objective.
    const double reference = c["objective"].get<double>();
    CHECK(model.objective <= reference + 1e-9);
    CHECK_THAT(model.objective, WithinAbs(reference, 1e-6));
    const auto predictions = c["predictions"].get<std::vector<int>>();
    for (std::size_t r = 0; r < x.rows(); ++r) {
      const auto b = x.row_start[r], e = x.row_start[r + 1];
      CHECK(model.predict(std::span(x.columns).subspan(b, e - b), std::span(x.values).subspan(b, e - b)) ==
            predictions[r]);
    }
  }
}

TEST_CASE("the fit is deterministic and refuses bad input", "[baseline]") {
  const auto fixture = load_fixture();
  const auto& c = fixture["cases"]["multiclass"];
  const auto x = rows_of(c);
  const auto labels = c["labels"].get<std::vector<std::int32_t>>();
  LbfgsOptions options;
  const auto a = gyre::eval::fit_logistic_regression(x, labels, 4, 40, options);
  const auto b = gyre::eval::fit_logistic_regression(x, labels, 4, 40, options);
  CHECK(a.weights == b.weights);  // bit for bit: same order of every sum
  CHECK(a.bias == b.bias);
  auto bad = labels;
  bad[3] = 4;
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, bad, 4, 40, options), gyre::Error);
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, labels, 1, 40, options), gyre::Error);
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, labels, 4, 10, options), gyre::Error);
  std::vector<std::int32_t> short_labels(labels.begin(), labels.end() - 1);
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, short_labels, 4, 40, options), gyre::Error);
}

TEST_CASE("the fit is the same bit for bit on any number of threads", "[baseline]") {
  // Several chunks of the objective (4096 rows on one thread, 16384 on more), uneven rows and
  // column frequencies, so the row split of the scores and the column split of the gradient both
  // cut somewhere non-trivial.
  std::mt19937 gen(11);
  const int features = 700, classes = 5;
  SparseRows sparse;
  gyre::eval::CountRows counts;
  std::vector<std::int32_t> labels;
  std::vector<std::pair<std::int32_t, std::int32_t>> row;
  std::vector<std::int32_t> cols;
  std::vector<double> vals;
  for (int r = 0; r < 40000; ++r) {
    std::set<std::int32_t> picked;
    const int size = 1 + static_cast<int>(gen() % 12);
    for (int e = 0; e < size; ++e) {
      const auto u = static_cast<double>(gen() % 10000) / 10000.0;
      picked.insert(static_cast<std::int32_t>(u * u * features));  // low columns more frequent
    }
    row.clear();
    cols.clear();
    vals.clear();
    for (const auto c : picked) {
      row.emplace_back(c, 1 + static_cast<std::int32_t>(gen() % 4));
      cols.push_back(c);
      vals.push_back(static_cast<double>(gen() % 1000) / 500.0 - 1.0);
    }
    counts.add_row(row);
    sparse.add_row(cols, vals);
    labels.push_back(static_cast<std::int32_t>((picked.empty() ? 0 : *picked.begin()) % classes));
  }
  LbfgsOptions options;
  options.max_iterations = 25;
  const auto one = gyre::eval::fit_logistic_regression(sparse, labels, classes, features, options);
  const auto one_counts = gyre::eval::fit_logistic_regression(counts, labels, classes, features, options);
  CHECK(one.iterations == 25);
  for (const int threads : {2, 3, 8}) {
    INFO("threads " << threads);
    options.threads = threads;
    const auto many = gyre::eval::fit_logistic_regression(sparse, labels, classes, features, options);
    CHECK(many.weights == one.weights);
    CHECK(many.bias == one.bias);
    CHECK(many.objective == one.objective);
    const auto many_counts = gyre::eval::fit_logistic_regression(counts, labels, classes, features, options);
    CHECK(many_counts.weights == one_counts.weights);
    CHECK(many_counts.bias == one_counts.bias);
  }
}

TEST_CASE("a warm start from another C reaches the same optimum in fewer iterations", "[baseline]") {
  const auto fixture = load_fixture();
  const auto& c = fixture["cases"]["weak_penalty"];
  const auto x = rows_of(c);
  const auto labels = c["labels"].get<std::vector<std::int32_t>>();
  const int classes = c["classes"].get<int>();
  const int features = c["features"].get<int>();
  LbfgsOptions options;
  options.gradient_tolerance = 1e-9;
  options.c = c["c"].get<double>() / 10;
  const auto stronger = gyre::eval::fit_logistic_regression(x, labels, classes, features, options);
  options.c = c["c"].get<double>();
  const auto cold = gyre::eval::fit_logistic_regression(x, labels, classes, features, options);
  const auto warm = gyre::eval::fit_logistic_regression(x, labels, classes, features, options, &stronger);
  CHECK(warm.converged);
  CHECK(warm.iterations < cold.iterations);
  // The objective is strictly convex: one optimum, sklearn's (ref: tests/fixtures/baseline/logreg.json).
  CHECK_THAT(warm.objective, WithinAbs(cold.objective, 1e-6 * std::abs(cold.objective)));
  CHECK(warm.objective <= c["objective"].get<double>() + 1e-6 * std::abs(c["objective"].get<double>()));
  gyre::eval::LinearModel other = stronger;
  other.classes += 1;
  CHECK_THROWS_AS(gyre::eval::fit_logistic_regression(x, labels, classes, features, options, &other),
                  gyre::Error);
}

TEST_CASE("a search over C puts back an earlier fit instead of fitting it again", "[baseline]") {
  gyre::eval::NgramClassifier clf(1);
  const std::vector<std::vector<std::string>> texts{
      {"works", "fine"}, {"does", "not", "work"}, {"fine", "now"}, {"not", "fine"}};
  const std::vector<std::int32_t> labels{0, 1, 0, 1};
  for (std::size_t i = 0; i < texts.size(); ++i) clf.add(texts[i], labels[i]);
  LbfgsOptions options;
  options.c = 1.0;
  clf.fit(2, options);
  const gyre::eval::LinearModel first = clf.model();
  options.c = 100.0;
  clf.fit(2, options);
  CHECK(clf.model().weights != first.weights);
  clf.use_model(first, 1.0);
  CHECK(clf.model().weights == first.weights);
  CHECK(clf.model().bias == first.bias);
  CHECK(clf.c() == 1.0);
  gyre::eval::LinearModel other = first;
  other.features += 1;
  CHECK_THROWS_AS(clf.use_model(other, 1.0), gyre::Error);
}

TEST_CASE("word shapes and n-gram keys", "[baseline]") {
  using gyre::eval::word_shape;
  CHECK(word_shape("Marrowby") == "Xxx");
  CHECK(word_shape("Marrowby's") == "Xxx'x");
  CHECK(word_shape("12-B") == "dd-X");
  CHECK(word_shape("KC-2000") == "XX-dd");
  CHECK(word_shape("") == "");
  CHECK(word_shape("caf\xc3\xa9") == "xx\xc3\xa9");  // non-ASCII bytes kept as they are
  std::vector<std::string> keys;
  const std::vector<std::string> tokens{"the", "kettle", "hums"};
  // Order 2: the tokens, then the bigrams of the list padded with the begin/end markers
  // (gyre/runtime/ngram_part.hpp, worked by hand).
  gyre::eval::NgramClassifier::ngrams(tokens, 2, keys);
  CHECK(keys == std::vector<std::string>{"the", "kettle", "hums", "\x02\x01the", "the\x01kettle",
                                         "kettle\x01hums", "hums\x01\x03"});
  gyre::eval::NgramClassifier::ngrams(tokens, 1, keys);  // replaces the content
  CHECK(keys == tokens);
  CHECK_THROWS(gyre::eval::NgramClassifier(2, 0));
  CHECK_THROWS(gyre::eval::NgramClassifier(2, gyre::runtime::kMaxNgramOrder + 1));
  const std::vector<std::string> raw{"The", "Kettle", "hums"};
  gyre::eval::WindowTagger::features(tokens, raw, 0, keys);
  CHECK(keys == std::vector<std::string>{"w-1=<s>", "w0=the", "w+1=kettle", "s-1=<s>", "s0=Xxx", "s+1=Xxx"});
  gyre::eval::WindowTagger::features(tokens, raw, 2, keys);
  CHECK(keys ==
        std::vector<std::string>{"w-1=kettle", "w0=hums", "w+1=</s>", "s-1=Xxx", "s0=xx", "s+1=</s>"});
}

TEST_CASE("n-gram classifier and window tagger learn a separable rule", "[baseline]") {
  // Label = whether the token "not" occurs; a bigram-free rule the unigram weights carry.
  gyre::eval::NgramClassifier clf(1);
  const std::vector<std::vector<std::string>> texts{{"works", "fine"}, {"does", "not", "work"},
                                                    {"fine", "now"},   {"not", "fine"},
                                                    {"it", "works"},   {"not", "now"}};
  const std::vector<std::int32_t> labels{0, 1, 0, 1, 0, 1};
  for (std::size_t i = 0; i < texts.size(); ++i) clf.add(texts[i], labels[i]);
  clf.fit(2, LbfgsOptions{});
  for (std::size_t i = 0; i < texts.size(); ++i) CHECK(clf.predict(texts[i]) == labels[i]);
  const auto p = clf.probabilities(texts[1]);
  CHECK_THAT(p[0] + p[1], WithinAbs(1.0, 1e-12));
  CHECK(p[1] > 0.5);
  CHECK(clf.predict(std::vector<std::string>{"unseen"}) >= 0);  // no known feature: bias decides

  // As an n-gram part (mix 1): the same scores in float, keys sorted = the fitted columns.
  const gyre::runtime::NgramPart part = clf.part(1.0F);
  CHECK(part.order() == 2);
  CHECK(part.classes() == 2);
  CHECK(part.features() == clf.feature_count());
  CHECK(std::is_sorted(part.keys().begin(), part.keys().end()));
  gyre::runtime::NgramScratch scratch;
  for (const auto& text : texts) {
    float logits[2] = {0.0F, 0.0F};
    part.add_scores(text, logits, scratch);
    const auto q = clf.probabilities(text);
    // softmax of the part's scores = the classifier's probabilities (float vs double: 1e-5).
    const double p1 = 1.0 / (1.0 + std::exp(static_cast<double>(logits[0]) - logits[1]));
    CHECK_THAT(p1, WithinAbs(q[1], 1e-5));
  }
  CHECK_THROWS(clf.part(0.0F));
  CHECK_THROWS(gyre::eval::NgramClassifier().part(1.0F));  // not fitted

  // Tagger: capitalised tokens after "in" are places; the shape feature carries capitalisation.
  gyre::eval::WindowTagger tagger;
  const std::vector<std::string> t1{"lives", "in", "marrowby"}, r1{"lives", "in", "Marrowby"};
  const std::vector<std::string> g1{"O", "O", "B-place"};
  const std::vector<std::string> t2{"in", "the", "shed"}, r2{"in", "the", "shed"};
  const std::vector<std::string> g2{"O", "O", "O"};
  for (int rep = 0; rep < 3; ++rep) {
    tagger.add(t1, r1, g1);
    tagger.add(t2, r2, g2);
  }
  tagger.fit(LbfgsOptions{});
  CHECK(tagger.tag_names() == std::vector<std::string>{"B-place", "O"});
  CHECK(tagger.predict(t1, r1) == g1);
  CHECK(tagger.predict(t2, r2) == g2);
  CHECK_THROWS_AS(tagger.add(t1, r2, std::vector<std::string>{"O"}), gyre::Error);
}

namespace {

// The fit as it was made before the examples were interned (every example's token strings kept,
// document frequencies counted over string keys, rows featurised by string lookups): the interned
// storage must give this exact model. Written from the header's definition of the features.
gyre::eval::LinearModel fit_from_strings(const std::vector<std::vector<std::string>>& texts,
                                         const std::vector<std::int32_t>& labels, int classes, int min_df,
                                         const LbfgsOptions& options, std::size_t& features,
                                         std::size_t max_features = 0) {
  std::map<std::string, int> df;
  std::vector<std::string> keys;
  for (const auto& t : texts) {
    gyre::eval::NgramClassifier::ngrams(t, 2, keys);
    std::sort(keys.begin(), keys.end());
    keys.erase(std::unique(keys.begin(), keys.end()), keys.end());
    for (const auto& k : keys) ++df[k];
  }
  // The feature cap's rule (gyre/eval/linear_baseline.hpp), written out: sort the keys reaching
  // min_df by (document frequency descending, key ascending) and keep the first max_features.
  std::vector<std::pair<int, std::string>> ranked;
  for (const auto& [k, n] : df)
    if (n >= min_df) ranked.emplace_back(-n, k);
  std::sort(ranked.begin(), ranked.end());
  if (max_features > 0 && ranked.size() > max_features) ranked.resize(max_features);
  std::set<std::string> kept;
  for (const auto& [minus_df, k] : ranked) kept.insert(k);
  std::map<std::string, std::int32_t> index;  // std::map: sorted keys, columns in that order
  for (const auto& k : kept) index.emplace(k, static_cast<std::int32_t>(index.size()));
  SparseRows x;
  for (const auto& t : texts) {
    gyre::eval::NgramClassifier::ngrams(t, 2, keys);
    std::map<std::int32_t, int> counts;
    for (const auto& k : keys)
      if (const auto it = index.find(k); it != index.end()) ++counts[it->second];
    std::vector<std::int32_t> cols;
    std::vector<double> vals;
    double norm = 0;
    for (const auto& [c, n] : counts) {
      cols.push_back(c);
      vals.push_back(1.0 + std::log(static_cast<double>(n)));
      norm += vals.back() * vals.back();
    }
    if (norm > 0)
      for (auto& v : vals) v /= std::sqrt(norm);
    x.add_row(cols, vals);
  }
  features = index.size();
  return gyre::eval::fit_logistic_regression(x, labels, classes, static_cast<int>(index.size()), options);
}

// Seeded synthetic texts over a small vocabulary (repeated tokens, so counts > 1 and min_df
// pruning both occur); labels follow a few marker tokens. Invented data, not a check value.
void synthetic_texts(std::vector<std::vector<std::string>>& texts, std::vector<std::int32_t>& labels) {
  std::uint64_t s = 12345;
  auto next = [&] {
    s = s * 6364136223846793005ULL + 1442695040888963407ULL;
    return static_cast<std::uint32_t>(s >> 33);
  };
  for (int i = 0; i < 300; ++i) {
    const auto label = static_cast<std::int32_t>(next() % 3);
    std::vector<std::string> t;
    const auto len = 3 + next() % 12;
    for (std::uint32_t j = 0; j < len; ++j) t.push_back("w" + std::to_string(next() % 60));
    t.push_back("mark" + std::to_string(label * 2 + static_cast<std::int32_t>(next() % 2)));
    texts.push_back(std::move(t));
    labels.push_back(label);
  }
}

bool same_model(const gyre::eval::LinearModel& a, const gyre::eval::LinearModel& b) {
  // Tolerance 0 on purpose: the contract is the same model, bit for bit.
  return a.features == b.features && a.classes == b.classes && a.weights == b.weights && a.bias == b.bias &&
         a.iterations == b.iterations;
}

}  // namespace

TEST_CASE("n-gram classifier: interned rows give the model the string features give", "[baseline]") {
  std::vector<std::vector<std::string>> texts;
  std::vector<std::int32_t> labels;
  synthetic_texts(texts, labels);
  for (const int min_df : {1, 2, 5})
    for (const bool counted : {false, true}) {
      SECTION("min_df " + std::to_string(min_df) + (counted ? ", counting pass" : "")) {
        gyre::eval::NgramClassifier clf(min_df);
        if (counted)
          for (const auto& t : texts) clf.count(t);
        for (std::size_t i = 0; i < texts.size(); ++i) clf.add(texts[i], labels[i]);
        CHECK_THROWS_AS(clf.count(texts[0]), gyre::Error);  // counting comes before add()
        // Storage: one (key, count) entry per distinct n-gram of each example, one copy of each
        // key; with the counting pass only keys whose fingerprint reaches min_df, which include
        // every key held by >= min_df examples.
        std::map<std::string, int> df;
        std::size_t entries = 0, kept_entries = 0;
        std::vector<std::string> keys;
        for (const auto& t : texts) {
          gyre::eval::NgramClassifier::ngrams(t, 2, keys);
          const std::set<std::string> distinct(keys.begin(), keys.end());
          entries += distinct.size();
          for (const auto& k : distinct) ++df[k];
        }
        std::size_t kept = 0;
        for (const auto& [k, n] : df)
          if (n >= min_df) {
            ++kept;
            kept_entries += static_cast<std::size_t>(n);
          }
        CHECK(clf.example_count() == texts.size());
        if (!counted || min_df == 1) {
          CHECK(clf.entry_count() == entries);
          CHECK(clf.key_count() == df.size());
        } else {
          CHECK(clf.entry_count() >= kept_entries);
          CHECK(clf.entry_count() < entries);
          CHECK(clf.key_count() >= kept);
          CHECK(clf.key_count() < df.size());
        }
        // Fitting again with another C on the same stored examples gives a fresh fit's model.
        for (const double c : {1.0, 100.0, 10.0}) {
          LbfgsOptions options;
          options.c = c;
          clf.fit(3, options);
          std::size_t features = 0;
          const auto expected = fit_from_strings(texts, labels, 3, min_df, options, features);
          CHECK(clf.feature_count() == features);
          CHECK(clf.feature_count() == kept);
          CHECK(same_model(clf.model(), expected));
        }
        const auto before = clf.probabilities(texts[7]);
        clf.release_examples();
        CHECK(clf.example_count() == 0);
        CHECK(clf.entry_count() == 0);
        CHECK(clf.key_count() == 0);
        CHECK(clf.probabilities(texts[7]) == before);  // the fitted model is kept (exact)
        CHECK_THROWS_AS(clf.fit(3, LbfgsOptions{}), gyre::Error);
      }
    }
}

TEST_CASE("window tagger: interned keys give the model the string features give", "[baseline]") {
  const std::vector<std::vector<std::string>> sentences{{"book", "a", "fix", "in", "marrowby"},
                                                        {"the", "kettle", "on", "elm", "street"},
                                                        {"in", "marrowby", "now"}};
  const std::vector<std::vector<std::string>> raws{{"Book", "a", "fix", "in", "Marrowby"},
                                                   {"The", "KC-20", "on", "Elm", "Street"},
                                                   {"in", "Marrowby", "now"}};
  const std::vector<std::vector<std::string>> tags{
      {"O", "O", "O", "O", "B-town"}, {"O", "B-item", "O", "B-street", "I-street"}, {"O", "B-town", "O"}};
  gyre::eval::WindowTagger tagger;
  for (int rep = 0; rep < 2; ++rep)
    for (std::size_t i = 0; i < sentences.size(); ++i) tagger.add(sentences[i], raws[i], tags[i]);
  // Reference: rows of the string keys, columns in sorted key order, tags sorted.
  std::set<std::string> all;
  std::vector<std::vector<std::string>> token_keys;
  std::vector<std::string> token_tags;
  std::vector<std::string> keys;
  for (int rep = 0; rep < 2; ++rep)
    for (std::size_t i = 0; i < sentences.size(); ++i)
      for (std::size_t t = 0; t < sentences[i].size(); ++t) {
        gyre::eval::WindowTagger::features(sentences[i], raws[i], t, keys);
        all.insert(keys.begin(), keys.end());
        token_keys.push_back(keys);
        token_tags.push_back(tags[i][t]);
      }
  CHECK(tagger.token_count() == token_keys.size());
  CHECK(tagger.key_count() == all.size());
  const std::vector<std::string> sorted_all(all.begin(), all.end());
  const std::set<std::string> tag_set(token_tags.begin(), token_tags.end());
  const std::vector<std::string> tag_names(tag_set.begin(), tag_set.end());
  SparseRows x;
  std::vector<std::int32_t> labels;
  const std::vector<double> ones(6, 1.0);
  for (std::size_t r = 0; r < token_keys.size(); ++r) {
    std::vector<std::int32_t> cols;
    for (const auto& k : token_keys[r])
      cols.push_back(static_cast<std::int32_t>(std::lower_bound(sorted_all.begin(), sorted_all.end(), k) -
                                               sorted_all.begin()));
    std::sort(cols.begin(), cols.end());
    x.add_row(cols, ones);
    labels.push_back(static_cast<std::int32_t>(
        std::lower_bound(tag_names.begin(), tag_names.end(), token_tags[r]) - tag_names.begin()));
  }
  for (const double c : {10.0, 1.0}) {
    LbfgsOptions options;
    options.c = c;
    tagger.fit(options);
    const auto expected = gyre::eval::fit_logistic_regression(x, labels, static_cast<int>(tag_names.size()),
                                                              static_cast<int>(sorted_all.size()), options);
    CHECK(tagger.tag_names() == tag_names);
    CHECK(tagger.feature_count() == sorted_all.size());
    CHECK(same_model(tagger.model(), expected));
  }
  const auto predicted = tagger.predict(sentences[2], raws[2]);
  tagger.release_examples();
  CHECK(tagger.token_count() == 0);
  CHECK(tagger.key_count() == 0);
  CHECK(tagger.predict(sentences[2], raws[2]) == predicted);
}

TEST_CASE("n-gram classifier: the feature cap keeps the keys in the most examples, ties by key bytes",
          "[baseline]") {
  std::vector<std::vector<std::string>> texts;
  std::vector<std::int32_t> labels;
  synthetic_texts(texts, labels);
  for (const int min_df : {1, 2})
    for (const bool counted : {false, true}) {
      // How many keys reach min_df (no cap), for caps below, at and above it.
      gyre::eval::NgramClassifier all(min_df);
      for (std::size_t i = 0; i < texts.size(); ++i) all.add(texts[i], labels[i]);
      all.fit(3, LbfgsOptions{});
      const std::size_t kept = all.feature_count();
      REQUIRE(kept > 100);
      CHECK(all.candidate_feature_count() == kept);
      for (const std::size_t cap :
           {std::size_t{1}, std::size_t{37}, std::size_t{100}, kept - 1, kept, kept + 5}) {
        SECTION("min_df " + std::to_string(min_df) + (counted ? ", counting pass" : "") + ", cap " +
                std::to_string(cap)) {
          LbfgsOptions options;
          options.c = 10.0;
          std::vector<gyre::runtime::NgramPart> parts;
          for (const int threads : {1, 2}) {
            gyre::eval::NgramClassifier clf(min_df, 2, cap);
            if (counted)
              for (const auto& t : texts) clf.count(t);
            for (std::size_t i = 0; i < texts.size(); ++i) clf.add(texts[i], labels[i]);
            options.threads = threads;
            clf.fit(3, options);
            CHECK(clf.candidate_feature_count() == kept);
            CHECK(clf.feature_count() == std::min(cap, kept));
            // The model the string features with the rule written out give, bit for bit.
            std::size_t features = 0;
            const auto expected = fit_from_strings(texts, labels, 3, min_df, options, features, cap);
            CHECK(features == clf.feature_count());
            CHECK(same_model(clf.model(), expected));
            parts.push_back(clf.part(1.0F));
          }
          // The same keys and weights on any number of threads.
          CHECK(parts[0].keys() == parts[1].keys());
          // Example order does not change which keys are kept.
          gyre::eval::NgramClassifier reversed(min_df, 2, cap);
          for (std::size_t i = texts.size(); i-- > 0;) reversed.add(texts[i], labels[i]);
          reversed.fit(3, options);
          CHECK(reversed.part(1.0F).keys() == parts[0].keys());
        }
      }
    }
  // A hand-checked case: "a" is in 3 examples, "b" and "c" in 2, "d" in 1 (min_df 1, order 1):
  // a cap of 2 keeps "a" and, of the tie b/c, "b" (the smaller key bytes).
  gyre::eval::NgramClassifier small(1, 1, 2);
  const std::vector<std::vector<std::string>> hand{{"c", "a"}, {"a", "b"}, {"b", "c", "a"}, {"d"}};
  for (std::size_t i = 0; i < hand.size(); ++i) small.add(hand[i], static_cast<std::int32_t>(i % 2));
  small.fit(2, LbfgsOptions{});
  CHECK(small.part(1.0F).keys() == std::vector<std::string>{"a", "b"});
  CHECK(small.candidate_feature_count() == 4);
}
