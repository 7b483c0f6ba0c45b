# MPI tests run the CLI under mpirun (label mpi); a build without MPI tests its refusal instead.
if(GYRE_WITH_MPI)
  target_compile_definitions(test_mpi PRIVATE GYRE_TEST_WITH_MPI=1 GYRE_MPIEXEC="${MPIEXEC_EXECUTABLE}")
endif()
