// Least squares against NIST StRD certified values and the WLTP worked example.
#include "core/regression.hpp"

#include <gtest/gtest.h>

#include <cmath>
#include <random>
#include <vector>

#include "core/trace_analysis.hpp"
#include "support/test_support.hpp"

using namespace loadtrim;
using loadtrim::testing::close_rel;

TEST(Regression, NistStrdPontius) {
  // NIST StRD Linear Least Squares, Pontius (quadratic, like a road-load curve): certified B0, B1, B2.
  const auto d = loadtrim::testing::read_strd("Pontius.txt");
  ASSERT_EQ(d.x.size(), 40u);
  ASSERT_EQ(d.certified.size(), 3u);
  const auto fit = core::fit_polynomial(d.x, d.y, 2);
  ASSERT_TRUE(fit.ok) << fit.message;
  for (int j = 0; j < 3; ++j) EXPECT_PRED3(close_rel, fit.coefficients(j), d.certified[j], 1e-9) << "B" << j;
  // Certified standard deviations of the estimates (NIST header): 0.107938612033077E-03,
  // 0.157817399981659E-09, 0.486652849992036E-16.
  EXPECT_PRED3(close_rel, std::sqrt(fit.covariance(0, 0)), 0.107938612033077E-03, 1e-7);
  EXPECT_PRED3(close_rel, std::sqrt(fit.covariance(1, 1)), 0.157817399981659E-09, 1e-7);
  EXPECT_PRED3(close_rel, std::sqrt(fit.covariance(2, 2)), 0.486652849992036E-16, 1e-7);
}

TEST(Regression, NistStrdWampler1Degree5) {
  // NIST StRD Wampler1: exact integer data, every certified coefficient 1, certified sd 0.
  const auto d = loadtrim::testing::read_strd("Wampler1.txt");
  ASSERT_EQ(d.x.size(), 21u);
  const auto fit = core::fit_polynomial(d.x, d.y, 5);
  ASSERT_TRUE(fit.ok) << fit.message;
  for (int j = 0; j < 6; ++j) EXPECT_NEAR(fit.coefficients(j), 1.0, 1e-9) << "B" << j;
  EXPECT_LT(fit.residual_sd, 1e-6);
}

TEST(Regression, WltpExampleTableRegressesBack) {
  // docs/standards.md §6.2 [computed from GTR 15 §8.1.3.2]: the forces from the table's Δt_j (3 decimals)
  // regress back to (100, 0.5, 0.03). Δt rounded to 0.0005 s moves a force by at most F·0.0005/Δt ≤ 0.053 N,
  // hence the bounds.
  const double speeds[] = {20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130};
  const double dt[] = {35.126, 30.179, 25.508, 21.427, 18.006, 15.197,
                       12.908, 11.045, 9.523,  8.273,  7.239,  6.377};
  const double ft[] = {122, 142, 168, 200, 238, 282, 332, 388, 450, 518, 592, 672};
  std::vector<double> forces;
  for (int j = 0; j < 12; ++j) {
    forces.push_back(core::band_force_n(1542.75, 5.0, dt[j]));
    EXPECT_NEAR(forces.back(), ft[j], 0.06) << speeds[j];
  }
  const auto fit = core::fit_road_load(speeds, forces);
  ASSERT_TRUE(fit.ok);
  EXPECT_NEAR(fit.coefficients.f0_n, 100.0, 0.1);
  EXPECT_NEAR(fit.coefficients.f1_n_per_kmh, 0.5, 0.003);
  EXPECT_NEAR(fit.coefficients.f2_n_per_kmh2, 0.03, 0.00002);
  for (double v : speeds) EXPECT_NEAR(fit.coefficients.force_n(v), 100 + 0.5 * v + 0.03 * v * v, 0.06);
}

TEST(Regression, ForceStandardErrorAgreesWithTheScatterOfRepeats) {
  // docs/standards.md §3.11: the uncertainty a decision rule uses is the least-squares standard error of
  // F(v), sqrt(gᵀ·Cov·g) with g = (1, v, v²) and Cov = s²·(XᵀX)⁻¹ (textbook ordinary least squares). Checked
  // against repeats: 4000 coast-downs whose band forces carry independent N(0, 2 N) errors (seeded); at each
  // speed the scatter of the fitted force must match the mean reported standard error. For 12 points and 3
  // parameters the mean of s is c4(10)·σ ≈ 0.973·σ (textbook), and 4000 repeats estimate a standard deviation
  // to about 1.1 %, hence the bounds 0.93–1.03 on the ratio.
  const std::vector<double> speeds = {20, 30, 40, 50, 60, 70, 80, 90, 100, 110, 120, 130};
  const core::RoadLoad truth{100, 0.5, 0.03};
  std::mt19937_64 rng(20261202);
  std::normal_distribution<double> noise(0.0, 2.0);
  for (double v : {20.0, 80.0, 130.0}) {
    double sum = 0, sum2 = 0, se_sum = 0;
    const int n = 4000;
    std::mt19937_64 r = rng;
    for (int k = 0; k < n; ++k) {
      std::vector<double> f;
      for (double s : speeds) f.push_back(truth.force_n(s) + noise(r));
      const auto fit = core::fit_road_load(speeds, f);
      ASSERT_TRUE(fit.ok);
      const double x = fit.coefficients.force_n(v);
      sum += x;
      sum2 += x * x;
      se_sum += fit.force_standard_error_n(v);
    }
    const double mean = sum / n, sd = std::sqrt((sum2 - n * mean * mean) / (n - 1));
    const double ratio = (se_sum / n) / sd;
    EXPECT_GT(ratio, 0.93) << v << " km/h: reported " << se_sum / n << " N, scatter " << sd << " N";
    EXPECT_LT(ratio, 1.03) << v << " km/h: reported " << se_sum / n << " N, scatter " << sd << " N";
    EXPECT_NEAR(mean, truth.force_n(v), 4.0 * sd / std::sqrt(n));  // unbiased (textbook)
  }
}

TEST(Regression, WeightsAndRefusals) {
  // A zero weight removes an outlier exactly (weighted least squares definition).
  std::vector<double> x = {20, 40, 60, 80, 100, 120}, y, w(6, 1.0);
  for (double v : x) y.push_back(90 + 0.4 * v + 0.03 * v * v);
  y[2] += 50.0;
  w[2] = 0.0;
  const auto fit = core::fit_road_load(x, y, w);
  ASSERT_TRUE(fit.ok);
  EXPECT_NEAR(fit.coefficients.f0_n, 90.0, 1e-9);
  EXPECT_NEAR(fit.coefficients.f2_n_per_kmh2, 0.03, 1e-12);
  EXPECT_FALSE(core::fit_road_load(std::vector<double>{20, 30}, std::vector<double>{1, 2}).ok);
  EXPECT_FALSE(core::fit_road_load(std::vector<double>{20, 20, 20}, std::vector<double>{1, 2, 3}).ok);
}
