# Extra ctest entries of optim (included from tests/CMakeLists.txt).

# The optimizer tests again with the training kernels capped (GYRE_NN_KERNELS, gyre/core/cpu_features.hpp),
# so each Adam update this CPU can run is checked against the torch fixtures: "avx2" takes the
# 8-lane kernel on an AVX-512 CPU, "portable" the scalar loop.
foreach(isa portable avx2)
  add_test(NAME "optim: optimizers with ${isa} kernels" COMMAND test_optim)
  set_tests_properties("optim: optimizers with ${isa} kernels" PROPERTIES ENVIRONMENT "GYRE_NN_KERNELS=${isa}"
    TIMEOUT 600)
endforeach()
