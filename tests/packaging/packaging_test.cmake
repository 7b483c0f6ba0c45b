# cmake -P script (see extra.cmake). Installs gyre into a scratch prefix, then, as a consumer would:
#  1. builds tests/packaging/consumer with find_package(gyre): train-and-embed (gyre::gyre, no C++
#     standard of its own, so cxx_std_20 must come from the target) trains a tiny model, exports
#     it int8 and classifies with the runtime; runtime-only (gyre::runtime, C++17) runs a fixture;
#  2. builds the same two programs with `pkg-config --cflags --libs gyre` / `gyre-runtime`;
#  3. (x86-64) disassembles the installed training libraries: no AVX/AVX-512 register may appear
#     outside the run-time-dispatched kernels (sgemm_avx2, fast_kernels), so they run on any x86-64.
# A GYRE_MARCH_NATIVE=ON build must refuse to install instead.
foreach(v BUILD_DIR SOURCE_DIR WORK_DIR GENERATOR CXX_COMPILER)
  if(NOT DEFINED ${v})
    message(FATAL_ERROR "packaging_test.cmake: ${v} not set")
  endif()
endforeach()
file(REMOVE_RECURSE ${WORK_DIR})
file(MAKE_DIRECTORY ${WORK_DIR})
set(prefix ${WORK_DIR}/prefix)

function(run)
  execute_process(COMMAND ${ARGN} RESULT_VARIABLE rc OUTPUT_VARIABLE out ERROR_VARIABLE err)
  if(NOT rc EQUAL 0)
    message(FATAL_ERROR "failed (${rc}): ${ARGN}\n${out}\n${err}")
  endif()
  set(run_out "${out}" PARENT_SCOPE)
endfunction()

if(NATIVE)
  execute_process(COMMAND ${CMAKE_COMMAND} --install ${BUILD_DIR} --prefix ${prefix}
                  RESULT_VARIABLE rc OUTPUT_VARIABLE out ERROR_VARIABLE err)
  if(rc EQUAL 0 OR NOT err MATCHES "GYRE_MARCH_NATIVE=ON")
    message(FATAL_ERROR "a GYRE_MARCH_NATIVE=ON build installed (or failed for another reason):\n${out}\n${err}")
  endif()
  message(STATUS "GYRE_MARCH_NATIVE=ON: installing is refused, as it must be")
  return()
endif()

run(${CMAKE_COMMAND} --install ${BUILD_DIR} --prefix ${prefix})
file(GLOB_RECURSE pc_files ${prefix}/*/gyre.pc)
list(LENGTH pc_files n)
if(NOT n EQUAL 1)
  message(FATAL_ERROR "expected one installed gyre.pc, found: ${pc_files}")
endif()
get_filename_component(pc_dir ${pc_files} DIRECTORY)
get_filename_component(lib_dir ${pc_dir} DIRECTORY)

# The expected output of runtime-only on the PyTorch fixture (tools/make_runtime_fixtures.py).
set(fixtures ${SOURCE_DIR}/tests/fixtures/runtime)
file(STRINGS ${fixtures}/embed_demo_expected.tsv rows REGEX "^[^#]")
list(GET rows 0 row)
string(REPLACE "\t" ";" fields "${row}")
list(GET fields 0 text)
list(GET fields 1 label)
list(GET fields 2 prob)
set(expected "${label}\t${prob}\n")

function(check_programs bin_dir how)
  run(${bin_dir}/train-and-embed ${WORK_DIR}/run-${how})
  if(NOT run_out MATCHES "^ok (billing|repair) [01]\\.[0-9]+\n$")
    message(FATAL_ERROR "train-and-embed (${how}) printed: ${run_out}")
  endif()
  run(${bin_dir}/runtime-only ${fixtures}/torch_lstm_uni_last.gyre "${text}")
  if(NOT run_out STREQUAL expected)
    message(FATAL_ERROR "runtime-only (${how}) printed '${run_out}', expected '${expected}'")
  endif()
endfunction()

# 1. find_package(gyre)
set(extra)
set(sanitize_flags)
if(SANITIZE)
  set(sanitize_flags -fsanitize=address,undefined)
  list(APPEND extra "-DCMAKE_EXE_LINKER_FLAGS=-fsanitize=address,undefined")
endif()
set(consumer ${SOURCE_DIR}/tests/packaging/consumer)
run(${CMAKE_COMMAND} -S ${consumer} -B ${WORK_DIR}/cmake-build -G ${GENERATOR} -DCMAKE_CXX_COMPILER=${CXX_COMPILER}
    -DCMAKE_PREFIX_PATH=${prefix} -DCMAKE_BUILD_TYPE=Release ${extra})
run(${CMAKE_COMMAND} --build ${WORK_DIR}/cmake-build)
check_programs(${WORK_DIR}/cmake-build find_package)

# 2. pkg-config
find_program(PKG_CONFIG pkg-config REQUIRED)
set(ENV{PKG_CONFIG_PATH} ${pc_dir})
file(MAKE_DIRECTORY ${WORK_DIR}/pc-build)
foreach(pair "train-and-embed;train_and_embed.cpp;gyre" "runtime-only;runtime_only.cpp;gyre-runtime")
  list(GET pair 0 program)
  list(GET pair 1 source)
  list(GET pair 2 package)
  run(${PKG_CONFIG} --cflags ${package})
  separate_arguments(cflags UNIX_COMMAND "${run_out}")
  run(${PKG_CONFIG} --libs ${package})
  separate_arguments(libs UNIX_COMMAND "${run_out}")
  set(std)
  if(package STREQUAL "gyre-runtime")
    set(std -std=c++17)  # the runtime's API is C++17
  endif()
  run(${CXX_COMPILER} ${std} -O1 ${sanitize_flags} ${cflags} ${consumer}/${source} -o ${WORK_DIR}/pc-build/${program} ${libs})
endforeach()
check_programs(${WORK_DIR}/pc-build pkg-config)

# 3. No CPU-specific code outside the dispatched kernels (x86-64). The runtime dispatches its own
#    kernels by CPU features (src/runtime/kernels*.cpp) and is left out.
if(PROCESSOR MATCHES "^(x86_64|AMD64|amd64)$")
  find_program(OBJDUMP objdump REQUIRED)
  # Translation units whose AVX code is only called after a CPU-feature check.
  set(dispatched "(sgemm_avx2|fast_kernels|fast_kernels_avx2|adam_kernel)\\.cpp\\.o$")
  file(GLOB archives ${lib_dir}/libgyre*.a)
  list(FILTER archives EXCLUDE REGEX "libgyre_runtime\\.a$")
  set(bad "")
  foreach(archive IN LISTS archives)
    run(${OBJDUMP} -d --no-show-raw-insn ${archive})
    string(REGEX MATCHALL "\n[^\n]+:[ \t]+file format[^\n]*|%[yz]mm[0-9]+" hits "${run_out}")
    set(member "")
    foreach(hit IN LISTS hits)
      if(hit MATCHES "file format")
        string(REGEX REPLACE "^\n([^:]+):.*" "\\1" member "${hit}")
      elseif(NOT member MATCHES "${dispatched}" AND NOT bad MATCHES "${member}")
        string(APPEND bad "  ${archive}: ${member} uses ${hit}\n")
      endif()
    endforeach()
  endforeach()
  if(bad)
    message(FATAL_ERROR "installed code needs AVX outside the dispatched GEMM kernels:\n${bad}")
  endif()
endif()
message(STATUS "gyre::gyre and gyre::runtime consumers built with find_package and pkg-config, and ran")
