#include "core/learners/fast_exp.h"

#include <cmath>
#include <limits>

#include "gtest/gtest.h"

namespace bellwether {
namespace {

// Against the C library's exp in double precision, rounded to float: the largest error
// over a dense sweep of [-87, 88] stays within 4 units in the last place.
TEST(ExpF, AgreesWithTheLibraryExpToAFewUlps) {
  double worst_ulps = 0;
  for (double x = -87.0; x <= 88.0; x += 1e-4) {
    const float xf = static_cast<float>(x);
    const double want = std::exp(static_cast<double>(xf));
    const double got = static_cast<double>(ExpF(xf));
    const double ulp = static_cast<double>(
        std::nextafter(static_cast<float>(want), std::numeric_limits<float>::infinity()) -
        static_cast<float>(want));
    worst_ulps = std::max(worst_ulps, std::fabs(got - want) / ulp);
  }
  EXPECT_LT(worst_ulps, 4.0);
  EXPECT_EQ(ExpF(0.0f), 1.0f);
}

TEST(ExpF, ClampsOutsideTheNormalRange) {
  EXPECT_GT(ExpF(1000.0f), 1e38f);
  EXPECT_TRUE(std::isfinite(ExpF(1000.0f)));
  EXPECT_GT(ExpF(-1000.0f), 0.0f);
  EXPECT_LT(ExpF(-1000.0f), 1e-37f);
  EXPECT_TRUE(std::isnan(ExpF(std::numeric_limits<float>::quiet_NaN())));
  EXPECT_GT(ExpF(std::numeric_limits<float>::infinity()), 1e38f);
  EXPECT_EQ(ExpF(-std::numeric_limits<float>::infinity()), ExpF(-1000.0f));
}

}  // namespace
}  // namespace bellwether
