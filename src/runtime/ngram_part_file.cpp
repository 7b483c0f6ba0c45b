// The n-gram part's tensors in a model file (docs/model-format.md "N-gram part").

#include "gyre/runtime/ngram_part_file.hpp"

#include <algorithm>
#include <cstdint>
#include <string_view>

#include "gyre/runtime/error.hpp"

namespace gyre::runtime {

std::vector<unsigned char> encode_ngram_keys(const std::vector<std::string>& keys) {
  std::vector<unsigned char> out;
  const std::string* prev = nullptr;
  for (std::size_t i = 0; i < keys.size(); ++i) {
    const std::string& key = keys[i];
    if (key.empty() || key.size() > kMaxNgramKeyBytes)
      throw Error("n-gram key " + std::to_string(i) + " has " + std::to_string(key.size()) +
                  " bytes; a key has 1 to " + std::to_string(kMaxNgramKeyBytes));
    if (prev != nullptr && !(*prev < key))
      throw Error("n-gram keys are not sorted and unique at key " + std::to_string(i));
    std::size_t shared = 0;
    if (prev != nullptr) {
      const std::size_t limit = std::min<std::size_t>({prev->size(), key.size(), 255});
      while (shared < limit && (*prev)[shared] == key[shared]) ++shared;
    }
    out.push_back(static_cast<unsigned char>(shared));
    std::size_t rest = key.size() - shared;  // >= 1: a key is never a prefix of the one before
    do {
      const auto low = static_cast<unsigned char>(rest & 0x7FU);
      rest >>= 7;
      out.push_back(static_cast<unsigned char>(low | (rest != 0 ? 0x80U : 0U)));
    } while (rest != 0);
    out.insert(out.end(), key.begin() + static_cast<std::ptrdiff_t>(shared), key.end());
    prev = &key;
  }
  return out;
}

std::vector<std::string> decode_ngram_keys(const unsigned char* data, std::size_t size, std::size_t count,
                                           const std::string& where) {
  // Every key takes >= 3 bytes (shared, length, one new byte), so count is bounded by size before
  // anything is reserved.
  if (count > size / 3)
    throw Error(where + ": " + std::to_string(count) + " keys cannot fit in " + std::to_string(size) +
                " bytes");
  std::vector<std::string> keys;
  keys.reserve(count);
  std::size_t pos = 0;
  for (std::size_t i = 0; i < count; ++i) {
    auto fail = [&](const std::string& what) -> void {
      throw Error(where + ": key " + std::to_string(i) + " (byte " + std::to_string(pos) + "): " + what);
    };
    if (pos >= size) fail("the key list ends early");
    const std::size_t shared = data[pos++];
    const std::string empty;
    const std::string& prev = i > 0 ? keys[i - 1] : empty;
    if (shared > prev.size()) fail("shares more bytes than the previous key has");
    std::size_t rest = 0;
    for (int shift = 0;; shift += 7) {
      if (pos >= size) fail("the key list ends early");
      if (shift > 21) fail("length field too long");
      const unsigned char byte = data[pos++];
      rest |= static_cast<std::size_t>(byte & 0x7FU) << shift;
      if ((byte & 0x80U) == 0) break;
    }
    if (rest == 0 || shared + rest > kMaxNgramKeyBytes)
      fail("length " + std::to_string(shared + rest) + " is outside 1.." + std::to_string(kMaxNgramKeyBytes) +
           " (or adds no byte)");
    if (rest > size - pos) fail("runs past the end of the key list");
    const auto* first = reinterpret_cast<const char*>(data + pos);
    // Sorted and unique: after the shared bytes, the rest is greater than the rest of the previous
    // key (bytes compared unsigned, as std::string does; shared may stop short of the common prefix
    // at 255).
    if (!(std::string_view(prev).substr(shared) < std::string_view(first, rest)))
      fail("is not greater than the key before it (keys must be sorted bytewise and unique)");
    std::string key;
    key.reserve(shared + rest);
    key.assign(prev, 0, shared);
    key.append(first, rest);
    pos += rest;
    keys.push_back(std::move(key));
  }
  if (pos != size)
    throw Error(where + ": " + std::to_string(size - pos) + " bytes left after the last of " +
                std::to_string(count) + " keys");
  return keys;
}

NgramPart read_ngram_part(const ModelHeader& h, const ModelFile& file, bool keep_int8) {
  const Architecture& a = h.architecture;
  if (!a.has_ngram_part()) return NgramPart();
  const std::string where = file.name() + ": n-gram part";
  const TensorInfo& kt = file.tensor("ngram.keys");
  const TensorInfo& wt = file.tensor("ngram.w");
  const TensorInfo& bt = file.tensor("ngram.b");
  const std::size_t K = a.ngram_keys, C = h.labels.size();
  if (kt.dtype != DType::kU8 || wt.rows != C || wt.cols != K || bt.elements() != C)
    throw Error(where + ": tensors do not match the header (run check_model_tensors first)");
  std::vector<std::string> keys =
      decode_ngram_keys(static_cast<const unsigned char*>(kt.data), static_cast<std::size_t>(kt.bytes), K,
                        where + ": ngram.keys");
  try {
    if (keep_int8 && wt.dtype == DType::kI8) {
      // One byte per weight, transposed to feature-major; the file's per-class scales kept.
      const auto* q = static_cast<const std::int8_t*>(wt.data);
      std::vector<std::int8_t> qweights(K * C);
      for (std::size_t c = 0; c < C; ++c)
        for (std::size_t k = 0; k < K; ++k) qweights[k * C + c] = q[c * K + k];
      return NgramPart(a.ngram_order, std::move(keys), std::move(qweights),
                       std::vector<float>(wt.scales, wt.scales + C), file.read_f32(bt), a.ngram_mix);
    }
    const std::vector<float> class_major = file.read_f32(wt);
    std::vector<float> weights(K * C);
    for (std::size_t c = 0; c < C; ++c)
      for (std::size_t k = 0; k < K; ++k) weights[k * C + c] = class_major[c * K + k];
    return NgramPart(a.ngram_order, std::move(keys), std::move(weights), file.read_f32(bt), a.ngram_mix);
  } catch (const Error& e) {
    throw Error(file.name() + ": " + e.what());
  }
}

void describe_ngram_part(const NgramPart& part, Architecture& arch) {
  arch.ngram_order = part.empty() ? 0 : part.order();
  arch.ngram_mix = part.empty() ? 0.0f : part.mix();
  arch.ngram_keys = part.empty() ? 0 : part.features();
}

void add_ngram_part(ModelFileWriter& w, const NgramPart& part, DType precision) {
  if (part.empty()) return;
  const std::size_t K = part.features(), C = static_cast<std::size_t>(part.classes());
  if (K == 0) throw Error("n-gram part: a part without keys cannot be stored");
  const std::vector<unsigned char> blob = encode_ngram_keys(part.keys());
  w.add_bytes("ngram.keys", Span<const unsigned char>(blob.data(), blob.size()));
  std::vector<float> class_major(K * C);
  for (std::size_t k = 0; k < K; ++k)
    for (std::size_t c = 0; c < C; ++c) class_major[c * K + k] = part.weight(k, c);
  w.add_tensor("ngram.w", C, K, Span<const float>(class_major.data(), class_major.size()), precision);
  w.add_tensor("ngram.b", 1, C, Span<const float>(part.bias().data(), part.bias().size()));
}

}  // namespace gyre::runtime
