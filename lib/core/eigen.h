// Eigen for every lib/ folder (learn, physics, chaos, ...): include this
// instead of <Eigen/Core>, before any other header that might pull in Eigen
// or the x86 intrinsics headers. lib/core itself does not link Eigen; the
// folders that include this do.
//
// With -march=native on AVX-512 machines, GCC 12 reports a false
// -Wmaybe-uninitialized / -Wuninitialized inside the intrinsics Eigen inlines
// (avx512fintrin.h: `__m512 __Y = __Y;` in _mm512_undefined_ps; GCC bug
// 105593, fixed in later GCC releases), and a false -Warray-bounds when a fixed-size
// vector (Vector3d) is assigned to a dynamic Map: the 8-wide packet load sits
// behind a runtime size check GCC does not follow. GCC attributes these
// warnings to the intrinsic header's lines, so ignoring them while those
// headers are read silences exactly these false positives and nothing in our
// own code (out-of-bounds access is still caught by the ASan test build).
#pragma once

#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#pragma GCC diagnostic ignored "-Wuninitialized"
#pragma GCC diagnostic ignored "-Warray-bounds"
#if defined(__x86_64__) || defined(__i386__)
#include <immintrin.h>  // read here, under the pragma, whoever includes it later
#endif
#include <Eigen/Core>
#pragma GCC diagnostic pop
