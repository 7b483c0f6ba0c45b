// Reader and writer of the model-file container; the byte layout is specified in
// docs/model-format.md and the two must change together.

#include "gyre/runtime/model_file.hpp"

#include <algorithm>
#include <cerrno>
#include <cmath>
#include <cstdio>
#include <cstring>
#include <limits>
#include <string>

#include "gyre/runtime/utf8.hpp"
#include "runtime/detail/checksum.hpp"
#include "runtime/detail/half.hpp"
#include "runtime/detail/json.hpp"

#if defined(__unix__) || defined(__APPLE__)
#include <fcntl.h>
#include <sys/mman.h>
#include <sys/stat.h>
#include <unistd.h>
#define GYRE_RUNTIME_HAS_MMAP 1
#endif

#if defined(__BYTE_ORDER__) && __BYTE_ORDER__ != __ORDER_LITTLE_ENDIAN__
#error "the gyre runtime reads tensors in place and needs a little-endian host"
#endif

namespace gyre::runtime {
namespace {

constexpr unsigned char kMagic[8] = {'g', 'y', 'r', 'e', '.', 'm', 'f', 0};
constexpr std::uint32_t kByteOrderMark = 0x0A0B0C0DU;
constexpr std::uint32_t kByteOrderMarkSwapped = 0x0D0C0B0AU;
constexpr unsigned char kTrailerTag[4] = {'g', 'e', 'n', 'd'};
constexpr std::uint64_t kPreambleBytes = 64;
constexpr std::uint64_t kTrailerBytes = 8;
constexpr std::uint64_t kDataAlign = 64;
constexpr std::uint64_t kMinEntryBytes = 8 + 8 + 24 + 8;  // fixed part, rank 1, 1-byte name padded

std::uint32_t load_u32(const unsigned char* p) {
  return std::uint32_t{p[0]} | std::uint32_t{p[1]} << 8 | std::uint32_t{p[2]} << 16 |
         std::uint32_t{p[3]} << 24;
}
std::uint64_t load_u64(const unsigned char* p) {
  return std::uint64_t{load_u32(p)} | std::uint64_t{load_u32(p + 4)} << 32;
}
std::uint16_t load_u16(const unsigned char* p) {
  return static_cast<std::uint16_t>(p[0] | (p[1] << 8));
}
void store_u32(unsigned char* p, std::uint32_t v) {
  for (int i = 0; i < 4; ++i) p[i] = static_cast<unsigned char>(v >> (8 * i));
}
void store_u64(unsigned char* p, std::uint64_t v) {
  for (int i = 0; i < 8; ++i) p[i] = static_cast<unsigned char>(v >> (8 * i));
}
std::uint64_t align_up(std::uint64_t v, std::uint64_t a) {
  return (v + a - 1) / a * a;
}

/// Index of the first NaN or infinity among n f32 or f16 values, n when there is none. IEEE 754:
/// a value is not finite exactly when its exponent bits are all ones.
std::uint64_t first_non_finite(const void* data, DType dtype, std::uint64_t n) {
  const auto* p = static_cast<const unsigned char*>(data);
  if (dtype == DType::kF32) {
    for (std::uint64_t i = 0; i < n; ++i)
      if ((load_u32(p + 4 * i) & 0x7F800000U) == 0x7F800000U) return i;
  } else if (dtype == DType::kF16) {
    for (std::uint64_t i = 0; i < n; ++i)
      if ((load_u16(p + 2 * i) & 0x7C00U) == 0x7C00U) return i;
  }
  return n;
}

class Reader {
 public:
  Reader(const std::string& name) : name_(name) {}
  [[noreturn]] void fail(const std::string& msg) const { throw Error(name_ + ": " + msg); }

 private:
  const std::string& name_;
};

}  // namespace

const char* to_string(DType dtype) {
  switch (dtype) {
    case DType::kF32:
      return "f32";
    case DType::kF16:
      return "f16";
    case DType::kI8:
      return "i8";
    case DType::kU8:
      return "u8";
  }
  return "?";
}

DType dtype_from_string(std::string_view name) {
  if (name == "f32") return DType::kF32;
  if (name == "f16") return DType::kF16;
  if (name == "i8" || name == "int8") return DType::kI8;
  throw Error("unknown precision \"" + std::string(name) + "\" (expected f32, f16 or int8)");
}

std::size_t dtype_size(DType dtype) {
  switch (dtype) {
    case DType::kF32:
      return 4;
    case DType::kF16:
      return 2;
    case DType::kI8:
    case DType::kU8:
      return 1;
  }
  return 0;
}

std::string TensorInfo::shape_string() const {
  std::string s = "[";
  for (std::size_t i = 0; i < shape.size(); ++i) {
    if (i) s += " x ";
    s += std::to_string(shape[i]);
  }
  return s + "]";
}

// ---------------------------------------------------------------------------------------------
// Reader

ModelFile ModelFile::from_buffer(const void* data, std::size_t size, std::string name) {
  ModelFile f;
  f.base_ = static_cast<const unsigned char*>(data);
  f.size_ = size;
  f.name_ = std::move(name);
  f.parse();
  return f;
}

ModelFile ModelFile::from_bytes(std::vector<unsigned char> bytes, std::string name) {
  auto owned = std::make_shared<std::vector<unsigned char>>(std::move(bytes));
  ModelFile f;
  f.base_ = owned->data();
  f.size_ = owned->size();
  f.keep_alive_ = owned;
  f.name_ = std::move(name);
  f.parse();
  return f;
}

ModelFile ModelFile::open(const std::string& path, bool verify_checksum) {
#if defined(GYRE_RUNTIME_HAS_MMAP)
  const int fd = ::open(path.c_str(), O_RDONLY | O_CLOEXEC);
  if (fd < 0) throw Error(path + ": cannot open: " + std::strerror(errno));
  struct stat st {};
  if (::fstat(fd, &st) != 0) {
    const int e = errno;
    ::close(fd);
    throw Error(path + ": cannot stat: " + std::strerror(e));
  }
  if (!S_ISREG(st.st_mode)) {
    ::close(fd);
    throw Error(path + ": not a regular file");
  }
  const auto size = static_cast<std::size_t>(st.st_size);
  if (size < kPreambleBytes + kTrailerBytes) {
    ::close(fd);
    throw Error(path + ": file is too short to be a gyre model file (" + std::to_string(size) + " bytes)");
  }
  void* map = ::mmap(nullptr, size, PROT_READ, MAP_PRIVATE, fd, 0);
  const int e = errno;
  ::close(fd);
  if (map == MAP_FAILED) throw Error(path + ": cannot memory-map: " + std::strerror(e));
  ModelFile f;
  f.keep_alive_ =
      std::shared_ptr<const void>(map, [size](const void* p) { ::munmap(const_cast<void*>(p), size); });
  f.base_ = static_cast<const unsigned char*>(map);
  f.size_ = size;
  f.name_ = path;
  f.parse(verify_checksum);
  return f;
#else
  std::FILE* fp = std::fopen(path.c_str(), "rb");
  if (!fp) throw Error(path + ": cannot open: " + std::strerror(errno));
  std::vector<unsigned char> bytes;
  unsigned char buf[1 << 16];
  std::size_t n;
  while ((n = std::fread(buf, 1, sizeof buf, fp)) > 0) bytes.insert(bytes.end(), buf, buf + n);
  const bool bad = std::ferror(fp) != 0;
  std::fclose(fp);
  if (bad) throw Error(path + ": read error");
  auto owned = std::make_shared<std::vector<unsigned char>>(std::move(bytes));
  ModelFile f;
  f.base_ = owned->data();
  f.size_ = owned->size();
  f.keep_alive_ = owned;
  f.name_ = path;
  f.parse(verify_checksum);
  return f;
#endif
}

namespace {

/// Where the sections are (preamble fields), checked against the file's size (reader rule 3).
struct Layout {
  std::uint64_t header_offset = 0, header_size = 0, table_offset = 0, tensor_count = 0, data_offset = 0;
  std::uint64_t data_end = 0;  // file size - trailer
};

/// A byte range of the data section and the tensor it belongs to (for the overlap check).
struct Region {
  std::uint64_t begin, end;
  std::size_t tensor;
};

// Reader rules 1 and 2: magic, byte order, version, size, trailer tag, checksum.
void check_preamble_and_trailer(const Reader& r, const unsigned char* b, std::size_t size,
                                bool verify_checksum, std::uint32_t& version, std::uint32_t& stored_crc,
                                std::uint32_t& actual_crc) {
  if (size < kPreambleBytes + kTrailerBytes)
    r.fail("file is too short to be a gyre model file (" + std::to_string(size) + " bytes)");
  if (reinterpret_cast<std::uintptr_t>(b) % 4 != 0)
    r.fail("buffer must be aligned to 4 bytes (64 recommended)");
  if (std::memcmp(b, kMagic, sizeof kMagic) != 0) r.fail("not a gyre model file (bad magic bytes)");
  const std::uint32_t bom = load_u32(b + 12);
  if (bom == kByteOrderMarkSwapped)
    r.fail("file was written in big-endian byte order, which gyre does not read");
  if (bom != kByteOrderMark) r.fail("corrupt byte-order mark");
  version = load_u32(b + 8);
  if (version == 0) r.fail("invalid file format version 0");
  if (version < kModelFormatVersion)
    r.fail("file format version " + std::to_string(version) +
           " was written by an older gyre; this one reads version " + std::to_string(kModelFormatVersion) +
           ", whose tensor names differ: retrain with this gyre, then " + "export again");
  if (version > kModelFormatVersion)
    r.fail("file format version " + std::to_string(version) + " is newer than this runtime (" +
           std::to_string(kModelFormatVersion) + "); upgrade gyre");
  const std::uint64_t file_size = load_u64(b + 16);
  if (file_size > size)
    r.fail("file is truncated: the header says " + std::to_string(file_size) + " bytes, only " +
           std::to_string(size) + " present");
  if (file_size < size)
    r.fail("file has " + std::to_string(size - file_size) + " unexpected bytes after its end (" +
           std::to_string(file_size) + " bytes)");
  if (std::memcmp(b + size - 4, kTrailerTag, 4) != 0) r.fail("corrupt trailer (bad end tag)");
  stored_crc = load_u32(b + size - 8);
  actual_crc = detail::crc32c(b, size - kTrailerBytes);
  if (stored_crc != actual_crc && verify_checksum) {
    char msg[128];
    std::snprintf(msg, sizeof msg,
                  "checksum mismatch (stored CRC-32C %08x, computed %08x): the file is corrupt", stored_crc,
                  actual_crc);
    r.fail(msg);
  }
}

// Reader rule 3. All arithmetic is checked against the file size first, so a hostile file can
// neither overflow it nor make us allocate more than the file holds.
Layout read_layout(const Reader& r, const unsigned char* b, std::size_t size) {
  Layout l;
  l.data_end = size - kTrailerBytes;
  l.header_offset = load_u64(b + 24);
  l.header_size = load_u64(b + 32);
  l.table_offset = load_u64(b + 40);
  l.tensor_count = load_u64(b + 48);
  l.data_offset = load_u64(b + 56);
  if (l.header_offset != kPreambleBytes)
    r.fail("header offset " + std::to_string(l.header_offset) + " is not 64");
  if (l.header_size > ModelFileLimits::kMaxHeaderBytes || l.header_size > l.data_end - l.header_offset)
    r.fail("header size " + std::to_string(l.header_size) + " exceeds the file");
  if (l.table_offset != align_up(l.header_offset + l.header_size, 8))
    r.fail("tensor table offset " + std::to_string(l.table_offset) + " is not right after the header");
  if (l.data_offset % kDataAlign != 0 || l.data_offset < l.table_offset || l.data_offset > l.data_end)
    r.fail("tensor data offset " + std::to_string(l.data_offset) + " is invalid");
  if (l.tensor_count > ModelFileLimits::kMaxTensors)
    r.fail("absurd tensor count " + std::to_string(l.tensor_count));
  if (l.tensor_count * kMinEntryBytes > l.data_offset - l.table_offset)
    r.fail("tensor table of " + std::to_string(l.tensor_count) + " entries does not fit before the data");
  return l;
}

// Reader rule 5, the values: i8 scales in range, f32/f16 elements finite.
void check_values(const Reader& r, const TensorInfo& t, const std::string& tw) {
  if (t.dtype == DType::kI8) {
    // 127 * scale must be finite too, or a weight q * scale would be infinite.
    constexpr float kMaxScale = std::numeric_limits<float>::max() / 127.0f;
    for (std::uint64_t row = 0; row < t.rows; ++row) {
      const float s = t.scales[row];
      if (!(s >= 0.0f && s <= kMaxScale)) {
        char value[32];
        std::snprintf(value, sizeof value, "%g", static_cast<double>(s));
        r.fail(tw + ": scale of row " + std::to_string(row) + " is " + value +
               "; a scale must be finite, >= 0 and at most 3.4e38 / 127");
      }
    }
    return;
  }
  const std::uint64_t bad = first_non_finite(t.data, t.dtype, t.elements());
  if (bad < t.elements())
    r.fail(tw + ": element " + std::to_string(bad) + " is not a finite number (NaN or infinity)");
}

// Reader rule 5 for the table entry at pos: fields, shape, in-file regions, values. Returns the
// entry's size in bytes.
std::uint64_t read_entry(const Reader& r, const unsigned char* b, const Layout& l, std::uint64_t pos,
                         std::uint64_t index, TensorInfo& t, std::vector<Region>& regions,
                         std::size_t tensor) {
  const std::string where = "tensor table entry " + std::to_string(index);
  const std::uint64_t table_end = l.data_offset;
  if (table_end - pos < 8) r.fail(where + " runs past the table");
  const std::uint32_t name_len = load_u32(b + pos);
  const auto dtype_code = b[pos + 4];
  const std::uint64_t rank = b[pos + 5];
  if (load_u16(b + pos + 6) != 0) r.fail(where + ": reserved field is not zero");
  if (name_len == 0 || name_len > ModelFileLimits::kMaxNameBytes)
    r.fail(where + ": invalid name length " + std::to_string(name_len));
  if (dtype_code > 3) r.fail(where + ": unknown dtype code " + std::to_string(dtype_code));
  if (rank == 0 || rank > ModelFileLimits::kMaxRank) r.fail(where + ": invalid rank " + std::to_string(rank));
  const std::uint64_t entry_bytes = 8 + 8 * rank + 24 + align_up(name_len, 8);
  if (table_end - pos < entry_bytes) r.fail(where + " runs past the table");
  t.dtype = static_cast<DType>(dtype_code);
  const unsigned char* e = b + pos + 8;
  t.name.assign(reinterpret_cast<const char*>(e + 8 * rank + 24), name_len);
  if (!is_valid_utf8(t.name)) r.fail(where + ": name is not valid UTF-8");
  const std::string tw = "tensor \"" + t.name + "\"";
  std::uint64_t elements = 1;
  t.shape.resize(rank);
  for (std::uint64_t d = 0; d < rank; ++d) {
    const std::uint64_t dim = load_u64(e + 8 * d);
    if (dim == 0 || dim > ModelFileLimits::kMaxElements || elements > ModelFileLimits::kMaxElements / dim)
      r.fail(tw + ": absurd shape (dimension " + std::to_string(d) + " = " + std::to_string(dim) + ")");
    elements *= dim;
    t.shape[d] = dim;
  }
  t.cols = t.shape.back();
  t.rows = elements / t.cols;
  t.offset = load_u64(e + 8 * rank);
  t.bytes = load_u64(e + 8 * rank + 8);
  t.scales_offset = load_u64(e + 8 * rank + 16);
  if (t.bytes != elements * dtype_size(t.dtype))
    r.fail(tw + ": data size " + std::to_string(t.bytes) + " does not match its shape " + t.shape_string() +
           " and dtype " + to_string(t.dtype));
  auto check_region = [&](std::uint64_t off, std::uint64_t len, const char* what) {
    if (off % kDataAlign != 0)
      r.fail(tw + ": " + what + " offset " + std::to_string(off) + " is not 64-byte aligned");
    if (off < l.data_offset || off > l.data_end || len > l.data_end - off)
      r.fail(tw + ": " + what + " (offset " + std::to_string(off) + ", " + std::to_string(len) +
             " bytes) lies outside the data section");
    regions.push_back({off, off + len, tensor});
  };
  check_region(t.offset, t.bytes, "data");
  t.data = b + t.offset;
  if (t.dtype == DType::kI8) {
    check_region(t.scales_offset, t.rows * 4, "scales");
    t.scales = reinterpret_cast<const float*>(b + t.scales_offset);
  } else if (t.scales_offset != 0) {
    r.fail(tw + ": scales offset must be 0 for dtype " + to_string(t.dtype));
  }
  check_values(r, t, tw);
  return entry_bytes;
}

// End of reader rule 5: no two regions overlap, names are unique.
void check_overlaps_and_names(const Reader& r, std::vector<Region>& regions,
                              const std::vector<TensorInfo>& tensors) {
  std::sort(regions.begin(), regions.end(),
            [](const Region& a, const Region& c) { return a.begin < c.begin; });
  for (std::size_t i = 1; i < regions.size(); ++i)
    if (regions[i].begin < regions[i - 1].end)
      r.fail("tensors \"" + tensors[regions[i - 1].tensor].name + "\" and \"" +
             tensors[regions[i].tensor].name + "\" overlap");
  std::vector<std::string_view> names;
  names.reserve(tensors.size());
  for (const auto& t : tensors) names.emplace_back(t.name);
  std::sort(names.begin(), names.end());
  for (std::size_t i = 1; i < names.size(); ++i)
    if (names[i] == names[i - 1]) r.fail("duplicate tensor name \"" + std::string(names[i]) + "\"");
}

}  // namespace

// The reader rules of docs/model-format.md, in their order.
void ModelFile::parse(bool verify_checksum) {
  const Reader r(name_);
  check_preamble_and_trailer(r, base_, size_, verify_checksum, version_, checksum_, computed_checksum_);
  const Layout l = read_layout(r, base_, size_);
  header_ = std::string_view(reinterpret_cast<const char*>(base_ + l.header_offset), l.header_size);
  try {
    const detail::Json h = detail::Json::parse(header_, "header JSON");
    if (!h.is_object()) r.fail("header JSON is not an object");
  } catch (const Error& e) {
    r.fail(e.what());
  }
  tensors_.reserve(l.tensor_count);  // bounded above by the table size
  std::vector<Region> regions;
  regions.reserve(l.tensor_count * 2);
  std::uint64_t pos = l.table_offset;
  for (std::uint64_t i = 0; i < l.tensor_count; ++i) {
    TensorInfo t;
    pos += read_entry(r, base_, l, pos, i, t, regions, tensors_.size());
    tensors_.push_back(std::move(t));
  }
  check_overlaps_and_names(r, regions, tensors_);
}

const TensorInfo* ModelFile::find(std::string_view name) const {
  for (const auto& t : tensors_)
    if (t.name == name) return &t;
  return nullptr;
}

const TensorInfo& ModelFile::tensor(std::string_view name) const {
  const TensorInfo* t = find(name);
  if (!t) throw Error(name_ + ": missing tensor \"" + std::string(name) + "\"");
  return *t;
}

void ModelFile::read_f32(const TensorInfo& t, Span<float> out) const {
  if (t.dtype == DType::kU8) throw Error(name_ + ": tensor \"" + t.name + "\" holds bytes (u8), not numbers");
  if (out.size() != t.elements())
    throw Error(name_ + ": read_f32: output size does not match tensor \"" + t.name + "\"");
  const std::size_t n = out.size();
  switch (t.dtype) {
    case DType::kF32:
      std::memcpy(out.data(), t.data, n * 4);
      break;
    case DType::kF16: {
      const auto* p = static_cast<const unsigned char*>(t.data);
      for (std::size_t i = 0; i < n; ++i) out[i] = detail::half_to_float(load_u16(p + 2 * i));
      break;
    }
    case DType::kI8: {
      const auto* q = static_cast<const std::int8_t*>(t.data);
      for (std::uint64_t row = 0; row < t.rows; ++row)
        for (std::uint64_t c = 0; c < t.cols; ++c)
          out[row * t.cols + c] = static_cast<float>(q[row * t.cols + c]) * t.scales[row];
      break;
    }
    case DType::kU8:
      break;
  }
}

std::vector<float> ModelFile::read_f32(const TensorInfo& t) const {
  std::vector<float> out(t.elements());
  read_f32(t, Span<float>(out));
  return out;
}

// ---------------------------------------------------------------------------------------------
// Writer

void ModelFileWriter::set_header_json(std::string header_json) {
  const detail::Json h = detail::Json::parse(header_json, "header JSON");
  if (!h.is_object()) throw Error("header JSON must be an object");
  header_ = std::move(header_json);
}

void ModelFileWriter::add_tensor(std::string name, std::vector<std::uint64_t> shape, Span<const float> values,
                                 DType dtype) {
  if (name.empty() || name.size() > ModelFileLimits::kMaxNameBytes || !is_valid_utf8(name))
    throw Error("tensor name must be 1.." + std::to_string(ModelFileLimits::kMaxNameBytes) +
                " bytes of UTF-8");
  for (const auto& t : tensors_)
    if (t.name == name) throw Error("duplicate tensor name \"" + name + "\"");
  if (shape.empty() || shape.size() > ModelFileLimits::kMaxRank)
    throw Error("tensor \"" + name + "\": rank must be 1..4");
  std::uint64_t elements = 1;
  for (auto d : shape) {
    if (d == 0 || elements > ModelFileLimits::kMaxElements / d)
      throw Error("tensor \"" + name + "\": invalid shape");
    elements *= d;
  }
  if (values.size() != elements)
    throw Error("tensor \"" + name + "\": " + std::to_string(values.size()) + " values for " +
                std::to_string(elements) + " elements");
  for (std::size_t i = 0; i < values.size(); ++i)
    if (!std::isfinite(values[i]))
      throw Error("tensor \"" + name + "\": value " + std::to_string(i) + " is not finite");
  if (dtype == DType::kU8) throw Error("tensor \"" + name + "\": numbers cannot be stored as u8 (bytes)");
  Pending p;
  p.name = std::move(name);
  p.dtype = dtype;
  p.cols = shape.back();
  p.rows = elements / p.cols;
  p.shape = std::move(shape);
  const std::size_t n = values.size();
  p.payload.resize(n * dtype_size(dtype));
  switch (dtype) {
    case DType::kF32:
      for (std::size_t i = 0; i < n; ++i) {
        std::uint32_t bits;
        std::memcpy(&bits, &values[i], 4);
        store_u32(&p.payload[4 * i], bits);
      }
      break;
    case DType::kF16:
      for (std::size_t i = 0; i < n; ++i) {
        const std::uint16_t h = detail::float_to_half(values[i]);
        p.payload[2 * i] = static_cast<unsigned char>(h);
        p.payload[2 * i + 1] = static_cast<unsigned char>(h >> 8);
      }
      break;
    case DType::kI8:
      // Symmetric per-row quantisation (Jacob et al. 2018, zero point 0): scale = max|w| / 127,
      // q = round(w / scale) in [-127, 127]; an all-zero row gets scale 0.
      p.scales.resize(p.rows);
      for (std::uint64_t row = 0; row < p.rows; ++row) {
        float max_abs = 0.0f;
        for (std::uint64_t c = 0; c < p.cols; ++c)
          max_abs = std::max(max_abs, std::fabs(values[row * p.cols + c]));
        const float scale = max_abs / 127.0f;
        p.scales[row] = scale;
        for (std::uint64_t c = 0; c < p.cols; ++c) {
          float q = scale > 0.0f ? std::nearbyint(values[row * p.cols + c] / scale) : 0.0f;
          q = std::min(127.0f, std::max(-127.0f, q));
          p.payload[row * p.cols + c] = static_cast<unsigned char>(static_cast<std::int8_t>(q));
        }
      }
      break;
    case DType::kU8:
      break;
  }
  tensors_.push_back(std::move(p));
}

void ModelFileWriter::add_bytes(std::string name, Span<const unsigned char> bytes) {
  if (name.empty() || name.size() > ModelFileLimits::kMaxNameBytes || !is_valid_utf8(name))
    throw Error("tensor name must be 1.." + std::to_string(ModelFileLimits::kMaxNameBytes) +
                " bytes of UTF-8");
  for (const auto& t : tensors_)
    if (t.name == name) throw Error("duplicate tensor name \"" + name + "\"");
  if (bytes.empty() || bytes.size() > ModelFileLimits::kMaxElements)
    throw Error("tensor \"" + name + "\": 1 to 2^36 bytes");
  Pending p;
  p.name = std::move(name);
  p.dtype = DType::kU8;
  p.rows = 1;
  p.cols = bytes.size();
  p.shape = {p.cols};
  p.payload.assign(bytes.begin(), bytes.end());
  tensors_.push_back(std::move(p));
}

std::vector<unsigned char> ModelFileWriter::to_bytes() const {
  const std::uint64_t header_size = header_.size();
  const std::uint64_t table_offset = align_up(kPreambleBytes + header_size, 8);
  std::uint64_t table_bytes = 0;
  for (const auto& t : tensors_) table_bytes += 8 + 8 * t.shape.size() + 24 + align_up(t.name.size(), 8);
  const std::uint64_t data_offset = align_up(table_offset + table_bytes, kDataAlign);
  std::vector<std::uint64_t> offsets, scale_offsets;
  std::uint64_t pos = data_offset;
  for (const auto& t : tensors_) {
    offsets.push_back(pos);
    pos = align_up(pos + t.payload.size(), kDataAlign);
    if (t.dtype == DType::kI8) {
      scale_offsets.push_back(pos);
      pos = align_up(pos + 4 * t.rows, kDataAlign);
    } else {
      scale_offsets.push_back(0);
    }
  }
  const std::uint64_t file_size = pos + kTrailerBytes;
  std::vector<unsigned char> out(file_size, 0);
  unsigned char* b = out.data();
  std::memcpy(b, kMagic, sizeof kMagic);
  store_u32(b + 8, kModelFormatVersion);
  store_u32(b + 12, kByteOrderMark);
  store_u64(b + 16, file_size);
  store_u64(b + 24, kPreambleBytes);
  store_u64(b + 32, header_size);
  store_u64(b + 40, table_offset);
  store_u64(b + 48, tensors_.size());
  store_u64(b + 56, data_offset);
  std::memcpy(b + kPreambleBytes, header_.data(), header_.size());
  std::uint64_t e = table_offset;
  for (std::size_t i = 0; i < tensors_.size(); ++i) {
    const auto& t = tensors_[i];
    store_u32(b + e, static_cast<std::uint32_t>(t.name.size()));
    b[e + 4] = static_cast<unsigned char>(t.dtype);
    b[e + 5] = static_cast<unsigned char>(t.shape.size());
    e += 8;
    for (auto d : t.shape) {
      store_u64(b + e, d);
      e += 8;
    }
    store_u64(b + e, offsets[i]);
    store_u64(b + e + 8, t.payload.size());
    store_u64(b + e + 16, scale_offsets[i]);
    e += 24;
    std::memcpy(b + e, t.name.data(), t.name.size());
    e += align_up(t.name.size(), 8);
    std::memcpy(b + offsets[i], t.payload.data(), t.payload.size());
    for (std::size_t row = 0; row < t.scales.size(); ++row) {
      std::uint32_t bits;
      std::memcpy(&bits, &t.scales[row], 4);
      store_u32(b + scale_offsets[i] + 4 * row, bits);
    }
  }
  store_u32(b + file_size - 8, detail::crc32c(b, file_size - kTrailerBytes));
  std::memcpy(b + file_size - 4, kTrailerTag, 4);
  return out;
}

void ModelFileWriter::write(const std::string& path) const {
  const std::vector<unsigned char> bytes = to_bytes();
#if defined(GYRE_RUNTIME_HAS_MMAP)
  const std::string tmp = path + ".tmp." + std::to_string(::getpid());
#else
  const std::string tmp = path + ".tmp";
#endif
  std::FILE* fp = std::fopen(tmp.c_str(), "wb");
  if (!fp) throw Error(path + ": cannot create " + tmp + ": " + std::strerror(errno));
  bool ok = std::fwrite(bytes.data(), 1, bytes.size(), fp) == bytes.size();
  ok = std::fflush(fp) == 0 && ok;
#if defined(GYRE_RUNTIME_HAS_MMAP)
  ok = ::fsync(::fileno(fp)) == 0 && ok;
#endif
  const int err = errno;
  ok = std::fclose(fp) == 0 && ok;
  if (!ok) {
    std::remove(tmp.c_str());
    throw Error(path + ": write failed: " + std::strerror(err));
  }
  if (std::rename(tmp.c_str(), path.c_str()) != 0) {
    const int e = errno;
    std::remove(tmp.c_str());
    throw Error(path + ": cannot rename " + tmp + " into place: " + std::strerror(e));
  }
}

}  // namespace gyre::runtime
