// One Catch2 main for every suite.
#define CATCH_CONFIG_MAIN
#include <catch2/catch.hpp>
