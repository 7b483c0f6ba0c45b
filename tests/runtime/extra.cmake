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
