// `loadtrim store bench` (src/app/store_bench.cpp): the record store's speed at a lab's scale.
#pragma once

#include <string>

namespace loadtrim::app {

struct StoreBenchArgs {
  int sessions = 10000;
  std::string postgresql;  // a libpq connection string: the bench also runs there, in scratch schemas
};
int store_bench(const StoreBenchArgs& a);

}  // namespace loadtrim::app
