#pragma once
// gyre::Span: a minimal non-owning view over contiguous elements, for the C++17 runtime (the
// C++20 library uses std::span). Never owns; the viewed memory must outlive the span.

#include <cstddef>
#include <vector>

namespace gyre {

template <class T>
class Span {
 public:
  constexpr Span() noexcept = default;
  constexpr Span(T* data, std::size_t size) noexcept : data_(data), size_(size) {}
  template <class U, class A>
  Span(const std::vector<U, A>& v) noexcept : data_(v.data()), size_(v.size()) {}  // NOLINT: implicit like std::span
  template <class U, class A>
  Span(std::vector<U, A>& v) noexcept : data_(v.data()), size_(v.size()) {}  // NOLINT
  template <std::size_t N>
  constexpr Span(T (&a)[N]) noexcept : data_(a), size_(N) {}  // NOLINT

  constexpr T* data() const noexcept { return data_; }
  constexpr std::size_t size() const noexcept { return size_; }
  constexpr bool empty() const noexcept { return size_ == 0; }
  constexpr T& operator[](std::size_t i) const noexcept { return data_[i]; }
  constexpr T* begin() const noexcept { return data_; }
  constexpr T* end() const noexcept { return data_ + size_; }
  constexpr Span subspan(std::size_t offset, std::size_t count) const noexcept { return {data_ + offset, count}; }

 private:
  T* data_ = nullptr;
  std::size_t size_ = 0;
};

}  // namespace gyre
