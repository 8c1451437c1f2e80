#include "store/store.hpp"

#include "store/schema.hpp"

namespace loadtrim::store {

int known_schema_version() {
  return schema::step_count();
}

bool is_iso_date(const std::string& date) {
  // YYYY-MM-DD: ISO 8601 calendar date, complete representation, extended format.
  if (date.size() != 10 || date[4] != '-' || date[7] != '-') return false;
  for (std::size_t i : {0u, 1u, 2u, 3u, 5u, 6u, 8u, 9u})
    if (date[i] < '0' || date[i] > '9') return false;
  const int y = std::stoi(date.substr(0, 4));
  const int m = std::stoi(date.substr(5, 2));
  const int d = std::stoi(date.substr(8, 2));
  if (m < 1 || m > 12 || d < 1) return false;
  // Gregorian leap years: divisible by 4, except centuries not divisible by 400.
  const bool leap = (y % 4 == 0 && y % 100 != 0) || y % 400 == 0;
  constexpr int kDays[] = {31, 28, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31};
  return d <= kDays[m - 1] + (m == 2 && leap ? 1 : 0);
}

}  // namespace loadtrim::store
