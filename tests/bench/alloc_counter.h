// Counts heap allocations made through global operator new (for benchmarks).
#pragma once
#include <cstdint>
namespace holdfast::bench {
uint64_t AllocationCount();
}
