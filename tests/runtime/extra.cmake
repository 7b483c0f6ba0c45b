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

# 2. find_package(gyre) consumer: install into a temporary prefix, build tools/embed-demo against
#    it, run it on a fixture model (needs the whole project built, as ctest runs after a build).
add_test(NAME "runtime: embed-demo against the installed gyre"
  COMMAND ${CMAKE_COMMAND} -DBUILD_DIR=${PROJECT_BINARY_DIR} -DSOURCE_DIR=${PROJECT_SOURCE_DIR}
    -DWORK_DIR=${CMAKE_CURRENT_BINARY_DIR}/tmp/embed-demo -DGENERATOR=${CMAKE_GENERATOR}
    -DCXX_COMPILER=${CMAKE_CXX_COMPILER} -DSANITIZE=${GYRE_SANITIZE}
    -P ${CMAKE_CURRENT_SOURCE_DIR}/runtime/embed_demo_test.cmake)
set_tests_properties("runtime: embed-demo against the installed gyre" PROPERTIES TIMEOUT 900)

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
