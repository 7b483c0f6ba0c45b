# Sourced (not run) by tools/run-tests.sh, tools/cross-test.sh and .ci/run after they cd to the
# repository root: compile through ccache when it is installed.
# Sets `ccache_launcher` to the CMake options for it (an empty array without ccache) and exports
# CCACHE_BASEDIR=<repository root>, so that build trees of the same sources under other names
# (CI's build/, build-mpi/, build-aarch64/) get each other's cached objects.
ccache_launcher=()
if command -v ccache >/dev/null 2>&1; then
  export CCACHE_BASEDIR="$PWD"
  ccache_launcher=(-DCMAKE_CXX_COMPILER_LAUNCHER=ccache -DCMAKE_C_COMPILER_LAUNCHER=ccache)
fi
