// `loadtrim store bench` (src/app/store_bench.cpp): the record store's speed at a lab's scale.
#pragma once

namespace loadtrim::app {

struct StoreBenchArgs {
  int sessions = 10000;
};
int store_bench(const StoreBenchArgs& a);

}  // namespace loadtrim::app
