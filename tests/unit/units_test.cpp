// Unit conversions against NIST SP 811 Appendix B (exact factors) and the EPA extract's own SI columns.
#include "core/units.hpp"

#include <gtest/gtest.h>

#include <fstream>
#include <sstream>

#include "core/road_load.hpp"
#include "support/test_support.hpp"

using namespace loadtrim;
using loadtrim::testing::close_rel;

TEST(Units, NistExactFactors) {
  // NIST SP 811 App. B: 1 lbf = 4.4482216152605 N; 1 mph = 0.44704 m/s = 1.609344 km/h; 1 lb = 0.45359237 kg.
  EXPECT_PRED3(close_rel, units::lbf_to_n(1.0), 4.4482216152605, 1e-12);
  EXPECT_PRED3(close_rel, units::n_to_lbf(4.4482216152605), 1.0, 1e-12);
  EXPECT_PRED3(close_rel, units::kmh_to_mps(units::mph_to_kmh(1.0)), 0.44704, 1e-12);
  EXPECT_PRED3(close_rel, units::mph_to_kmh(1.0), 1.609344, 1e-12);
  EXPECT_PRED3(close_rel, units::kmh_to_mph(1.609344), 1.0, 1e-12);
  EXPECT_PRED3(close_rel, units::lb_to_kg(1.0), 0.45359237, 1e-12);
  EXPECT_PRED3(close_rel, units::kg_to_lb(0.45359237), 1.0, 1e-12);
  EXPECT_PRED3(close_rel, units::mps_to_kmh(1.0), 3.6, 1e-12);
}

TEST(Units, RoundTripsBothDirections) {
  for (double x : {1e-3, 0.7, 1.0, 37.6, 1234.5, 98765.4321}) {
    EXPECT_PRED3(close_rel, units::n_to_lbf(units::lbf_to_n(x)), x, 1e-12);
    EXPECT_PRED3(close_rel, units::kmh_to_mph(units::mph_to_kmh(x)), x, 1e-12);
    EXPECT_PRED3(close_rel, units::kg_to_lb(units::lb_to_kg(x)), x, 1e-12);
    EXPECT_PRED3(close_rel, units::mps_to_kmh(units::kmh_to_mps(x)), x, 1e-12);
  }
}

TEST(Units, CoefficientFactors) {
  // docs/standards.md §1 [computed from NIST SP 811]: B × 2.763997 → N/(km/h); C × 1.717468 → N/(km/h)² (7
  // digits).
  const core::RoadLoad m = core::to_metric({1.0, 1.0, 1.0});
  EXPECT_PRED3(close_rel, m.f0_n, 4.4482216152605, 1e-12);
  EXPECT_NEAR(m.f1_n_per_kmh, 2.763997, 5e-7);
  EXPECT_NEAR(m.f2_n_per_kmh2, 1.717468, 5e-7);
  const core::RoadLoadUs us{37.6, 0.238, 0.0211};
  const core::RoadLoadUs back = core::to_us(core::to_metric(us));
  EXPECT_PRED3(close_rel, back.a_lbf, us.a_lbf, 1e-12);
  EXPECT_PRED3(close_rel, back.b_lbf_per_mph, us.b_lbf_per_mph, 1e-12);
  EXPECT_PRED3(close_rel, back.c_lbf_per_mph2, us.c_lbf_per_mph2, 1e-12);
  // The same force whichever units it is evaluated in: F(50 mph) in lbf × N/lbf = F(80.4672 km/h) in N.
  EXPECT_PRED3(close_rel, units::lbf_to_n(us.force_lbf(50.0)),
               core::to_metric(us).force_n(units::mph_to_kmh(50.0)), 1e-12);
}

TEST(Units, MatchesEpaExtractSiColumns) {
  // samples/data: the SI columns were computed from EPA's published lbf columns with the NIST factors and
  // kept to 6 significant digits, so our conversion must agree to 5e-6 relative on every row.
  std::ifstream in(std::string(LOADTRIM_SOURCE_DIR) + "/samples/data/epa_test_car_roadload_MY2016_2019.csv");
  ASSERT_TRUE(in);
  std::string line;
  std::getline(in, line);
  int checked = 0;
  while (std::getline(in, line) && checked < 3485) {
    std::vector<std::string> c;
    std::stringstream ss(line);
    std::string cell;
    while (std::getline(ss, cell, ',')) c.push_back(cell);
    ASSERT_GE(c.size(), 23u);
    const core::RoadLoad m = core::to_metric({std::stod(c[10]), std::stod(c[11]), std::stod(c[12])});
    EXPECT_PRED3(close_rel, m.f0_n, std::stod(c[17]), 5e-6) << line;
    EXPECT_PRED3(close_rel, m.f1_n_per_kmh, std::stod(c[18]), 5e-6) << line;
    EXPECT_PRED3(close_rel, m.f2_n_per_kmh2, std::stod(c[19]), 5e-6) << line;
    EXPECT_PRED3(close_rel, units::lb_to_kg(std::stod(c[9])), std::stod(c[16]), 5e-6) << line;
    ++checked;
  }
  EXPECT_EQ(checked, 3485);
}

TEST(Units, ReportRounding) {
  // 2018/1832 amending Sub-Annex 4 §2.4: f0 to 1 decimal, f1 to 3, f2 to 5.
  const core::RoadLoad r = core::rounded({142.04999, 0.35049, 0.0330049}, core::Rounding{});
  EXPECT_DOUBLE_EQ(r.f0_n, 142.0);
  EXPECT_DOUBLE_EQ(r.f1_n_per_kmh, 0.350);
  EXPECT_DOUBLE_EQ(r.f2_n_per_kmh2, 0.03300);
}
