# Extra ctest entries of compare (included from tests/CMakeLists.txt).

# The run report and the comparison report rendered in headless Chromium: nothing overflows its
# box, every chart is drawn and nothing in a chart is clipped (tools/check_report_layout.py).
# Skipped (exit 77) with a message when no Chromium is installed.
find_package(Python3 REQUIRED COMPONENTS Interpreter)
if(TARGET gyre_cli)
  add_test(NAME "compare: reports render cleanly in headless Chromium"
    COMMAND Python3::Interpreter ${PROJECT_SOURCE_DIR}/tools/check_report_layout.py $<TARGET_FILE:gyre_cli>
            ${CMAKE_CURRENT_BINARY_DIR}/tmp/browser)
  set_tests_properties("compare: reports render cleanly in headless Chromium" PROPERTIES
    LABELS browser SKIP_RETURN_CODE 77 TIMEOUT 600 RESOURCE_LOCK test_compare)
endif()
