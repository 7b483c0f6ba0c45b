#pragma once
// The n-gram part in a model file (docs/model-format.md "N-gram part"): header object
// "architecture.ngram" {order, mix, keys} and three tensors, `ngram.keys` (u8, the front-coded
// key list), `ngram.w` ([C x K], class-major, so an i8 file has one scale per class) and `ngram.b`
// ([1 x C], f32). Shared by the runtime's loader and the training library's checkpoints and export.
// C++17, standard library only.

#include <cstddef>
#include <string>
#include <vector>

#include "gyre/runtime/model_file.hpp"
#include "gyre/runtime/model_header.hpp"
#include "gyre/runtime/ngram_part.hpp"

namespace gyre::runtime {

/// Longest key the file format stores (our choice: 1 MiB, far above any n-gram of real tokens).
inline constexpr std::size_t kMaxNgramKeyBytes = 1U << 20;

/// Front coding of a sorted key list (Witten, Moffat & Bell, "Managing Gigabytes", 2nd ed. 1999,
/// section 4.1): per key one byte `shared` (bytes in common with the previous key, at most 255),
/// the length of the rest as an unsigned LEB128 varint (1 .. kMaxNgramKeyBytes), then those bytes.
/// Keys must be sorted bytewise, unique, non-empty and at most kMaxNgramKeyBytes long; throws
/// Error otherwise.
std::vector<unsigned char> encode_ngram_keys(const std::vector<std::string>& keys);
/// The inverse: exactly `count` keys filling all `size` bytes, each strictly greater than the one
/// before (bytewise) and at most kMaxNgramKeyBytes long. Throws Error("WHERE: ...") naming the key
/// and what is wrong. Decoded bytes are at most 86 x size (a key of >= 3 bytes decodes to <= 255 + the rest).
std::vector<std::string> decode_ngram_keys(const unsigned char* data, std::size_t size, std::size_t count,
                                           const std::string& where);

/// The part of a validated model file (parse_model_header + check_model_tensors passed): an empty
/// part when h has none. Weights in f32 (dequantised from f16/i8), or with keep_int8 and an i8
/// ngram.w its bytes and scales as stored (NgramPart::quantized(); what runtime::Model keeps: a
/// quarter of the memory, the same scores). Throws Error("FILE: n-gram part: ...") when the keys do
/// not decode or the part is otherwise invalid.
NgramPart read_ngram_part(const ModelHeader& h, const ModelFile& file, bool keep_int8 = false);
/// Sets arch's ngram_order / ngram_mix / ngram_keys from part (all 0 for an empty part).
void describe_ngram_part(const NgramPart& part, Architecture& arch);
/// Adds the part's three tensors to w, the weights in `precision` (f32, f16 or i8). No-op for an
/// empty part. Throws Error when the part cannot be stored (no keys, a key too long).
void add_ngram_part(ModelFileWriter& w, const NgramPart& part, DType precision = DType::kF32);

}  // namespace gyre::runtime
