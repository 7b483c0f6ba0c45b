# The installed gyre as consumers use it (tests/packaging/packaging_test.cmake): find_package with
# gyre::gyre (a program that trains a tiny model through the library API) and gyre::runtime, the
# pkg-config files, and no CPU-specific code outside the run-time-dispatched kernels. Label slow:
# it compiles two consumer programs twice (CMake and pkg-config), about a minute.
add_test(NAME "packaging: consumers build against the installed gyre"
  COMMAND ${CMAKE_COMMAND} -DBUILD_DIR=${PROJECT_BINARY_DIR} -DSOURCE_DIR=${PROJECT_SOURCE_DIR}
    -DWORK_DIR=${CMAKE_CURRENT_BINARY_DIR}/tmp/packaging -DGENERATOR=${CMAKE_GENERATOR}
    -DCXX_COMPILER=${CMAKE_CXX_COMPILER} -DSANITIZE=${GYRE_SANITIZE} -DNATIVE=${GYRE_MARCH_NATIVE}
    -DPROCESSOR=${CMAKE_SYSTEM_PROCESSOR}
    -P ${CMAKE_CURRENT_SOURCE_DIR}/packaging/packaging_test.cmake)
set_tests_properties("packaging: consumers build against the installed gyre" PROPERTIES LABELS slow TIMEOUT 1200)
