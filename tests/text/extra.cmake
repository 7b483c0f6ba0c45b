# The runtime tokenizer compiled without ICU and as C++17, as an embedder with
# -DGYRE_RUNTIME_ICU=OFF gets it (only tokenizer.cpp and utf8.cpp: it needs nothing else from the runtime).
add_executable(test_tokenizer_no_icu ${CMAKE_CURRENT_SOURCE_DIR}/text/no_icu_main.cpp
  ${PROJECT_SOURCE_DIR}/src/runtime/tokenizer.cpp ${PROJECT_SOURCE_DIR}/src/runtime/utf8.cpp)
set_target_properties(test_tokenizer_no_icu PROPERTIES CXX_STANDARD 17 CXX_STANDARD_REQUIRED ON CXX_EXTENSIONS OFF)
target_include_directories(test_tokenizer_no_icu PRIVATE ${PROJECT_SOURCE_DIR}/include ${PROJECT_SOURCE_DIR}/src)
target_link_libraries(test_tokenizer_no_icu PRIVATE gyre_warnings)
add_test(NAME "text:runtime tokenizer without ICU" COMMAND test_tokenizer_no_icu)
