/* SPDX-License-Identifier: ISC */
/*
 * benchutil: the clock and the seeded data source shared by the benchmark
 * programs (tests/bench). Header-only: each program is one file.
 */
#ifndef COEFD_BENCHUTIL_H
#define COEFD_BENCHUTIL_H

#include <stdint.h>
#include <time.h>

/* Monotonic seconds. */
static inline double
now_sec(void)
{
	struct timespec ts;

	clock_gettime(CLOCK_MONOTONIC, &ts);
	return (double)ts.tv_sec + (double)ts.tv_nsec * 1e-9;
}

/* splitmix64 (Steele, Lea & Flood 2014): enough for benchmark data. */
static inline uint64_t
mix(uint64_t *s)
{
	uint64_t z = (*s += 0x9e3779b97f4a7c15ULL);

	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9ULL;
	z = (z ^ (z >> 27)) * 0x94d049bb133111ebULL;
	return z ^ (z >> 31);
}

/* Uniform in [0, 1) with 53 random bits. */
static inline double
unif(uint64_t *s)
{
	return (double)(mix(s) >> 11) * 0x1p-53;
}

#endif
