#pragma once
// The gyre model-file container (docs/model-format.md): magic + format version, a JSON header,
// a tensor table, 64-byte-aligned tensor data and a CRC-32C trailer. It holds exported models and
// training checkpoints alike: arbitrary named tensors plus an arbitrary JSON header object.
// C++17, standard library only.

#include <cstddef>
#include <cstdint>
#include <memory>
#include <string>
#include <string_view>
#include <vector>

#include "gyre/runtime/error.hpp"
#include "gyre/runtime/span.hpp"

namespace gyre::runtime {

/// Current container version written by ModelFileWriter; readers refuse any other. Version 2
/// renamed the model tensors (docs/model-format.md, "Versions"), so version-1 files are refused
/// with a message saying to retrain rather than misread.
inline constexpr std::uint32_t kModelFormatVersion = 2;

/// Element types. Numeric values are the on-disk codes.
enum class DType : std::uint8_t {
  kF32 = 0,  // IEEE 754 binary32, little-endian
  kF16 = 1,  // IEEE 754 binary16, little-endian
  kI8 = 2,   // signed 8-bit, symmetric, one f32 scale per row: value = q * scale[row]
  kU8 = 3,   // raw bytes, not numbers (the n-gram part's key list); read_f32 refuses them
};
const char* to_string(DType dtype);
/// "f32", "f16" or "i8"/"int8" (precisions; u8 is not one); throws Error otherwise.
DType dtype_from_string(std::string_view name);
std::size_t dtype_size(DType dtype);

/// One entry of the tensor table. Pointers point into the file's bytes (mapped or the caller's
/// buffer) and stay valid while the ModelFile (or a copy of it) lives.
struct TensorInfo {
  std::string name;
  DType dtype = DType::kF32;
  std::vector<std::uint64_t> shape;  // 1..4 dimensions, each >= 1
  std::uint64_t rows = 0;            // product of all dimensions but the last
  std::uint64_t cols = 0;            // last dimension
  std::uint64_t offset = 0;          // absolute byte offset of the elements in the file
  std::uint64_t bytes = 0;           // rows * cols * dtype_size
  std::uint64_t scales_offset = 0;   // i8 only: absolute offset of rows f32 scales
  const void* data = nullptr;
  const float* scales = nullptr;  // i8 only

  std::uint64_t elements() const { return rows * cols; }
  /// "[4 x 8]" style.
  std::string shape_string() const;
};

/// A validated, read-only model file. Copies share the same bytes. Thread-safe to read.
class ModelFile {
 public:
  /// Memory-maps the file. Throws Error ("PATH: what is wrong") if it is missing, truncated,
  /// corrupt (checksum), of another format version or otherwise malformed.
  /// verify_checksum = false records a CRC mismatch (checksum_ok()) instead of throwing, for
  /// diagnostics such as `gyre inspect`; never use such a file for inference.
  static ModelFile open(const std::string& path, bool verify_checksum = true);
  /// Uses the caller's bytes without copying; they must outlive every copy of the result and be
  /// 4-byte aligned (64 recommended). `name` is used in error messages.
  static ModelFile from_buffer(const void* data, std::size_t size, std::string name = "<buffer>");
  /// Takes ownership of a byte vector (copies nothing).
  static ModelFile from_bytes(std::vector<unsigned char> bytes, std::string name = "<buffer>");

  const std::string& name() const { return name_; }
  std::uint32_t format_version() const { return version_; }
  std::size_t file_size() const { return size_; }
  /// CRC-32C stored in the trailer, and whether it matches the bytes.
  std::uint32_t checksum() const { return checksum_; }
  std::uint32_t computed_checksum() const { return computed_checksum_; }
  bool checksum_ok() const { return checksum_ == computed_checksum_; }
  /// The header: a UTF-8 JSON object (validated as strict JSON at load).
  std::string_view header_json() const { return header_; }
  const std::vector<TensorInfo>& tensors() const { return tensors_; }
  /// nullptr when absent.
  const TensorInfo* find(std::string_view name) const;
  /// Throws Error naming the file and tensor when absent.
  const TensorInfo& tensor(std::string_view name) const;
  /// The values of a tensor converted to f32 (i8: q * scale[row]). Throws Error for u8 (bytes).
  std::vector<float> read_f32(const TensorInfo& t) const;
  void read_f32(const TensorInfo& t, Span<float> out) const;
  /// Raw bytes of the whole file.
  const unsigned char* bytes() const { return base_; }

 private:
  ModelFile() = default;
  void parse(bool verify_checksum = true);
  std::shared_ptr<const void> keep_alive_;
  const unsigned char* base_ = nullptr;
  std::size_t size_ = 0;
  std::string name_;
  std::uint32_t version_ = 0;
  std::uint32_t checksum_ = 0;
  std::uint32_t computed_checksum_ = 0;
  std::string_view header_;
  std::vector<TensorInfo> tensors_;
};

/// Builds a model file: a JSON header object plus named f32 tensors, each stored as f32, f16
/// (round to nearest even) or i8 (symmetric per-row scales, Jacob et al. 2018). Throws Error on
/// bad input (non-object header, duplicate or empty names, non-finite values, size mismatch).
class ModelFileWriter {
 public:
  ModelFileWriter() = default;
  explicit ModelFileWriter(std::string header_json) { set_header_json(std::move(header_json)); }

  /// Must be a JSON object; validated with the runtime's strict parser.
  void set_header_json(std::string header_json);
  /// shape: 1..4 dimensions; values.size() must equal their product (row-major).
  void add_tensor(std::string name, std::vector<std::uint64_t> shape, Span<const float> values,
                  DType dtype = DType::kF32);
  void add_tensor(std::string name, std::uint64_t rows, std::uint64_t cols, Span<const float> values,
                  DType dtype = DType::kF32) {
    add_tensor(std::move(name), std::vector<std::uint64_t>{rows, cols}, values, dtype);
  }
  /// A tensor of raw bytes (dtype u8, shape [bytes.size()]), e.g. an encoded key list.
  void add_bytes(std::string name, Span<const unsigned char> bytes);
  std::size_t tensor_count() const { return tensors_.size(); }

  /// The complete file.
  std::vector<unsigned char> to_bytes() const;
  /// Writes atomically (temporary file in the same directory, fsync, rename). Throws Error.
  void write(const std::string& path) const;

 private:
  struct Pending {
    std::string name;
    DType dtype;
    std::vector<std::uint64_t> shape;
    std::uint64_t rows, cols;
    std::vector<unsigned char> payload;  // encoded elements
    std::vector<float> scales;           // i8 only
  };
  std::string header_ = "{}";
  std::vector<Pending> tensors_;
};

/// Format limits the reader enforces before allocating (documented in docs/model-format.md).
struct ModelFileLimits {
  static constexpr std::uint64_t kMaxHeaderBytes = 256ULL << 20;
  static constexpr std::uint64_t kMaxTensors = 1ULL << 16;
  static constexpr std::uint64_t kMaxNameBytes = 1024;
  static constexpr std::uint64_t kMaxRank = 4;
  static constexpr std::uint64_t kMaxElements = 1ULL << 36;
};

}  // namespace gyre::runtime
