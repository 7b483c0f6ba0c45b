# Shared helpers for gyre's targets. Each module under src/<name>/ is its own static library
# gyre_<name> (exported as gyre::<name>), so that the dependency direction in DESIGN.md
# (cli -> train/eval/io -> model -> nn; text, data -> ICU, json; runtime -> nothing) is enforced by
# the linker, and `gyre::gyre` links them all.

# Warnings live on an unexported INTERFACE target, as CLI11 does with CLI11_warnings.
add_library(gyre_warnings INTERFACE)
target_compile_options(gyre_warnings INTERFACE
  $<$<CXX_COMPILER_ID:GNU,Clang>:-Wall -Wextra -Wpedantic -Wshadow -Wconversion -Wnon-virtual-dtor>
  # GCC 12 at -O3 reports false -Wrestrict/-Warray-bounds/-Wstringop-overflow in libstdc++'s
  # std::string (https://gcc.gnu.org/bugzilla/show_bug.cgi?id=105329).
  # With -march=native on AVX-512 machines, GCC 12 also flags Eigen's packet code through
  # avx512fintrin.h with a false -Wmaybe-uninitialized (https://gitlab.com/libeigen/eigen/-/issues/2304).
  $<$<AND:$<CXX_COMPILER_ID:GNU>,$<VERSION_GREATER_EQUAL:$<CXX_COMPILER_VERSION>,12>>:-Wno-restrict -Wno-array-bounds -Wno-stringop-overflow -Wno-maybe-uninitialized>
  # Under -fsanitize (CI's ASan build, -O2) the same Eigen AVX-512 code is reported as a definite
  # -Wuninitialized; the unsanitised builds keep that warning on, so real cases are still caught.
  $<$<AND:$<BOOL:${GYRE_SANITIZE}>,$<CXX_COMPILER_ID:GNU>,$<VERSION_GREATER_EQUAL:$<CXX_COMPILER_VERSION>,12>>:-Wno-uninitialized>
  $<$<AND:$<BOOL:${GYRE_WARNINGS_AS_ERRORS}>,$<CXX_COMPILER_ID:GNU,Clang>>:-Werror>)

add_library(gyre_options INTERFACE)
target_compile_features(gyre_options INTERFACE cxx_std_20)
if(GYRE_SANITIZE)
  target_compile_options(gyre_options INTERFACE -fsanitize=address,undefined -fno-omit-frame-pointer -fno-sanitize-recover=undefined)
  target_link_options(gyre_options INTERFACE -fsanitize=address,undefined)
endif()
# Build-only (never exported, never installed: see GYRE_MARCH_NATIVE in the top CMakeLists.txt).
include(CheckCXXCompilerFlag)
check_cxx_compiler_flag(-march=native gyre_has_march_native)
if(GYRE_MARCH_NATIVE AND gyre_has_march_native)
  target_compile_options(gyre_options INTERFACE -march=native)
endif()

# gyre_module(NAME [PUBLIC_DEPS ...] [PRIVATE_DEPS ...] [CXX_STANDARD n])
# Builds every .cpp under src/NAME into the static library gyre_NAME.
function(gyre_module name)
  cmake_parse_arguments(M "" "CXX_STANDARD" "PUBLIC_DEPS;PRIVATE_DEPS" ${ARGN})
  file(GLOB_RECURSE srcs CONFIGURE_DEPENDS ${PROJECT_SOURCE_DIR}/src/${name}/*.cpp)
  if(NOT srcs)
    set(empty ${PROJECT_BINARY_DIR}/gyre_${name}_empty.cpp)
    file(WRITE ${empty} "// module ${name} has no sources yet\n")
    set(srcs ${empty})
  endif()
  add_library(gyre_${name} STATIC ${srcs})
  add_library(gyre::${name} ALIAS gyre_${name})
  set_target_properties(gyre_${name} PROPERTIES EXPORT_NAME ${name} POSITION_INDEPENDENT_CODE ON)
  target_include_directories(gyre_${name}
    PUBLIC $<BUILD_INTERFACE:${PROJECT_SOURCE_DIR}/include> $<INSTALL_INTERFACE:${CMAKE_INSTALL_INCLUDEDIR}>
    PRIVATE ${PROJECT_SOURCE_DIR}/src)
  # The headers use C++20 (std::span ...): consumers of the installed targets get it too.
  if(M_CXX_STANDARD)
    target_compile_features(gyre_${name} PUBLIC cxx_std_${M_CXX_STANDARD})
  else()
    target_compile_features(gyre_${name} PUBLIC cxx_std_20)
    target_link_libraries(gyre_${name} PUBLIC $<BUILD_INTERFACE:gyre_options>)
  endif()
  target_link_libraries(gyre_${name} PUBLIC ${M_PUBLIC_DEPS} PRIVATE ${M_PRIVATE_DEPS} $<BUILD_INTERFACE:gyre_warnings>)
  install(TARGETS gyre_${name} EXPORT gyreTargets ARCHIVE DESTINATION ${CMAKE_INSTALL_LIBDIR})
endfunction()
