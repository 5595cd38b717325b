// exp(x) for floats, written so that compilers vectorize loops that call it (std::exp is a
// library call per element). Range reduction x = n ln 2 + r with |r| <= ln(2) / 2 and a
// degree-6 polynomial for e^r: the Cephes single-precision expf scheme (S. L. Moshier,
// Cephes Math Library; coefficients from memory, checked against std::exp in
// tests/core/fast_exp_test.cc to a few units in the last place). Inputs are clamped to
// [-87, 88], where the result is a normal float; NaN gives NaN (found by fuzzing: a
// diverged weight's NaN reached the range reduction's float-to-int conversion).
#ifndef BELLWETHER_CORE_LEARNERS_FAST_EXP_H_
#define BELLWETHER_CORE_LEARNERS_FAST_EXP_H_

#include <algorithm>
#include <bit>
#include <cstdint>

namespace bellwether {

inline float ExpF(float x_in) {
  // NaN compares false both ways, so it takes the lower bound here (converting NaN to an
  // integer below would be undefined) and is handed back at the end.
  const float x = x_in > -87.0f ? (x_in < 88.0f ? x_in : 88.0f) : -87.0f;
  const float t = x * 1.44269504088896341f;  // x / ln 2
  const int32_t n = static_cast<int32_t>(t + (t >= 0.0f ? 0.5f : -0.5f));
  const float fn = static_cast<float>(n);
  // r = x - n ln 2, with ln 2 split in two so the product is exact in the first part.
  const float r = (x - fn * 0.693359375f) - fn * -2.12194440e-4f;
  float p = 1.9875691500e-4f;
  p = p * r + 1.3981999507e-3f;
  p = p * r + 8.3334519073e-3f;
  p = p * r + 4.1665795894e-2f;
  p = p * r + 1.6666665459e-1f;
  p = p * r + 5.0000001201e-1f;
  const float er = p * (r * r) + r + 1.0f;
  const float scale = std::bit_cast<float>(static_cast<uint32_t>(n + 127) << 23);  // 2^n
  return x_in == x_in ? er * scale : x_in;
}

}  // namespace bellwether

#endif  // BELLWETHER_CORE_LEARNERS_FAST_EXP_H_
