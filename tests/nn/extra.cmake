# Extra ctest entries of nn (included from tests/CMakeLists.txt).

# The layer tests again with the kernels capped (GYRE_NN_KERNELS), so the paths other CPUs take
# are checked end to end on this machine too: "avx2" takes the AVX2+FMA training kernels instead of
# the AVX-512 ones (src/nn/detail/fast_kernels.hpp); "portable" turns the training kernels off (the
# layers' Eigen path) and caps Eigen's GEMM at the baseline instruction set (src/nn/detail/sgemm.hpp).
foreach(isa portable avx2)
  add_test(NAME "nn: layers with ${isa} kernels" COMMAND test_nn "[gemm],[gradcheck],[parity],[alloc],[masking],[tbptt]")
  set_tests_properties("nn: layers with ${isa} kernels" PROPERTIES ENVIRONMENT "GYRE_NN_KERNELS=${isa}"
    RESOURCE_LOCK test_nn TIMEOUT 600)
endforeach()
