// Eigen for lib/physics: include this instead of <Eigen/Core>, before any
// other header that might pull in Eigen or the x86 intrinsics headers (the
// physics headers do, so their users are covered too).
//
// With -march=native on AVX-512 machines, GCC 12 reports a false
// -Wmaybe-uninitialized inside the intrinsics Eigen inlines (avx512fintrin.h:
// `__m512d __Y = __Y;` in _mm512_undefined_pd; GCC bug 105593, fixed in
// GCC 13; also google/highway#710, pytorch#77939). GCC attributes the warning
// to the intrinsic header's lines, so ignoring it while those headers are
// read silences exactly these false positives and nothing in our own code.
// Same approach as lib/learn/eigen.h (a shared core header would be better).
#pragma once

#pragma GCC diagnostic push
#pragma GCC diagnostic ignored "-Wmaybe-uninitialized"
#pragma GCC diagnostic ignored "-Wuninitialized"
#pragma GCC diagnostic ignored "-Warray-bounds"
#include <immintrin.h>  // read here, under the pragma, whoever includes it later
#include <Eigen/Core>
#pragma GCC diagnostic pop
