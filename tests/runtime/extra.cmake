# Extra ctest entries of the runtime (included from tests/CMakeLists.txt).

# 1. The C interface from a C program.
include(CheckLanguage)
check_language(C)
if(CMAKE_C_COMPILER)
  enable_language(C)
  add_executable(test_runtime_c ${CMAKE_CURRENT_SOURCE_DIR}/runtime/c_api_test.c)
  target_link_libraries(test_runtime_c PRIVATE gyre_runtime)
  set_target_properties(test_runtime_c PROPERTIES C_STANDARD 99 LINKER_LANGUAGE CXX)
  if(GYRE_SANITIZE)
    target_compile_options(test_runtime_c PRIVATE -fsanitize=address,undefined)
    target_link_options(test_runtime_c PRIVATE -fsanitize=address,undefined)
  endif()
  add_test(NAME "runtime: C API" COMMAND test_runtime_c ${GYRE_FIXTURES_DIR}/runtime)
endif()

# 1b. The same interface from C++ compiled with -fno-exceptions (the C API never throws).
add_executable(test_runtime_c_noexcept ${CMAKE_CURRENT_SOURCE_DIR}/runtime/c_api_noexcept_test.cpp)
set_target_properties(test_runtime_c_noexcept PROPERTIES CXX_STANDARD 17 CXX_STANDARD_REQUIRED ON)
target_compile_options(test_runtime_c_noexcept PRIVATE -fno-exceptions)
target_link_libraries(test_runtime_c_noexcept PRIVATE gyre_runtime gyre_warnings)
if(GYRE_SANITIZE)
  target_compile_options(test_runtime_c_noexcept PRIVATE -fsanitize=address,undefined)
  target_link_options(test_runtime_c_noexcept PRIVATE -fsanitize=address,undefined)
endif()
add_test(NAME "runtime: C API from C++ built with -fno-exceptions"
  COMMAND test_runtime_c_noexcept ${GYRE_FIXTURES_DIR}/runtime)

# 2. find_package(gyre) consumer: install into a temporary prefix, build tools/embed-demo against
#    it, run it on a fixture model (needs the whole project built, as ctest runs after a build).
if(NOT GYRE_MARCH_NATIVE)  # such a build refuses to install (tests/packaging checks that)
  add_test(NAME "runtime: embed-demo against the installed gyre"
    COMMAND ${CMAKE_COMMAND} -DBUILD_DIR=${PROJECT_BINARY_DIR} -DSOURCE_DIR=${PROJECT_SOURCE_DIR}
      -DWORK_DIR=${CMAKE_CURRENT_BINARY_DIR}/tmp/embed-demo -DGENERATOR=${CMAKE_GENERATOR}
      -DCXX_COMPILER=${CMAKE_CXX_COMPILER} -DSANITIZE=${GYRE_SANITIZE}
      -P ${CMAKE_CURRENT_SOURCE_DIR}/runtime/embed_demo_test.cmake)
  set_tests_properties("runtime: embed-demo against the installed gyre" PROPERTIES TIMEOUT 900)
endif()

# 3. libFuzzer on the loader for a bounded time (clang; skipped with code 77 when unavailable).
#    Not in the sanitizer build: the fuzzer carries its own ASan+UBSan.
if(NOT GYRE_SANITIZE)
  add_test(NAME "runtime: loader fuzzing (60 s)"
    COMMAND bash ${PROJECT_SOURCE_DIR}/tests/fuzz/run_fuzz.sh 60 ${CMAKE_CURRENT_BINARY_DIR}/fuzz)
  set_tests_properties("runtime: loader fuzzing (60 s)" PROPERTIES LABELS slow TIMEOUT 900 SKIP_RETURN_CODE 77)
endif()

# 4. The whole inference suite again with the kernels capped at the portable loops and at AVX2,
#    so the paths other CPUs (ARM, pre-AVX-512 x86) take are checked end to end here too.
foreach(isa portable avx2)
  add_test(NAME "runtime: inference with ${isa} kernels"
    COMMAND test_runtime "[inference],[parity],[alloc]")
  set_tests_properties("runtime: inference with ${isa} kernels" PROPERTIES ENVIRONMENT "GYRE_RUNTIME_ISA=${isa}")
endforeach()

# 5. Code size the runtime adds to a program (tools/footprint.py, README "Embedding"): the budget
#    is 420 KiB of loaded code and data (measured with ICU on x86-64: 293 KiB on 1 December 2026,
#    358.6 KiB on 2 December after the character encoder, calibration and the batched calls; the
#    budget keeps ~15% headroom over that, our choice; 400.1 KiB with the n-gram part, same day).
#    Optimised, uninstrumented builds only: a sanitizer or debug build measures its
#    instrumentation, not what ships.
if(NOT GYRE_SANITIZE AND CMAKE_BUILD_TYPE MATCHES "^(Release|MinSizeRel|RelWithDebInfo)$")
  find_package(Python3 REQUIRED COMPONENTS Interpreter)
  add_executable(footprint_probe ${CMAKE_CURRENT_SOURCE_DIR}/runtime/footprint_probe.c)
  target_link_libraries(footprint_probe PRIVATE gyre_runtime)
  add_executable(footprint_baseline ${CMAKE_CURRENT_SOURCE_DIR}/runtime/footprint_probe.c)
  target_compile_definitions(footprint_baseline PRIVATE GYRE_FOOTPRINT_BASELINE=1)
  set_target_properties(footprint_probe footprint_baseline PROPERTIES C_STANDARD 99 LINKER_LANGUAGE CXX)
  add_test(NAME "runtime: code size stays under the budget (420 KiB)"
    COMMAND Python3::Interpreter ${PROJECT_SOURCE_DIR}/tools/footprint.py $<TARGET_FILE:footprint_probe>
      $<TARGET_FILE:footprint_baseline> --budget-kib 420 --label "runtime (x86-64, ICU)")
  add_test(NAME "runtime: footprint probe classifies through the C API"
    COMMAND footprint_probe ${GYRE_FIXTURES_DIR}/runtime/torch_lstm_uni_last.gyre "t16 t19")
  # ref: tests/fixtures/runtime/torch_expected.tsv (python3-torch): label 1 of ("t16 t19") 0.455523937
  set_tests_properties("runtime: footprint probe classifies through the C API" PROPERTIES
    PASS_REGULAR_EXPRESSION "\t0\.4555")
endif()
