# Cross toolchain for 64-bit ARM Linux with Debian's cross compilers (g++-aarch64-linux-gnu).
# Test binaries run under qemu-user (qemu-aarch64 from Debian's qemu-user package): CMake puts
# CMAKE_CROSSCOMPILING_EMULATOR in front of every add_test() command, so no binfmt set-up is
# needed. Used by tests/cross/ (tools/cross-test.sh).
set(CMAKE_SYSTEM_NAME Linux)
set(CMAKE_SYSTEM_PROCESSOR aarch64)
set(gyre_cross_triple aarch64-linux-gnu)
find_program(CMAKE_C_COMPILER ${gyre_cross_triple}-gcc REQUIRED)
find_program(CMAKE_CXX_COMPILER ${gyre_cross_triple}-g++ REQUIRED)
find_program(gyre_qemu qemu-aarch64 REQUIRED)
# -L: where qemu finds the aarch64 dynamic loader and libraries (Debian's cross sysroot).
set(CMAKE_CROSSCOMPILING_EMULATOR ${gyre_qemu};-L;/usr/${gyre_cross_triple})
set(CMAKE_FIND_ROOT_PATH /usr/${gyre_cross_triple})
set(CMAKE_FIND_ROOT_PATH_MODE_PROGRAM NEVER)
set(CMAKE_FIND_ROOT_PATH_MODE_LIBRARY ONLY)
set(CMAKE_FIND_ROOT_PATH_MODE_INCLUDE ONLY)
set(CMAKE_FIND_ROOT_PATH_MODE_PACKAGE ONLY)
