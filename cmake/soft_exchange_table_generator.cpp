// Build step: src/xc/soft_exchange_1d.cpp run as a program, printing the 1D exchange table
// that the library then compiles in (see the top-level CMakeLists.txt).
#define STILLPOINT_SOFT_EXCHANGE_TABLE_GENERATOR
#include "../src/xc/soft_exchange_1d.cpp"
