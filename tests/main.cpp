// Catch2 (v2, Debian's catch2 package) main for every test executable.
#define CATCH_CONFIG_MAIN
#include <catch2/catch.hpp>
