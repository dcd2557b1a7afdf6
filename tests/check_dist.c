/* SPDX-License-Identifier: ISC */
/*
 * Unit tests for dist. References, named beside each table or check:
 * mpmath 1.2 at 50 digits and scipy 1.10 (Debian python3-mpmath,
 * python3-scipy), both printed by tests/ref/dist_ref.py, whose rows carry
 * the exact scipy call; the check values of /work/shared/NUMERICS.md
 * sections 6 and 7; textbook closed forms; an independent Markov-chain
 * discretisation of the CUSUM (numpy/scipy) and the CUSUM equation solved
 * in 30-digit arithmetic (mpmath), both also in dist_ref.py.
 */
#include <check.h>
#include <math.h>
#include <stddef.h>

#include "dist.h"
#include "err.h"
#include "limits.h"
#include "suites.h"

/* One-parameter reference row: argument, mpmath value, scipy value. */
struct ref1 {
	double	x;
	double	mp;
	double	sp;
};

/* Two-parameter reference row: argument, shape, mpmath, scipy. */
struct ref2 {
	double	x;
	double	par;
	double	mp;
	double	sp;
};

static double
relerr(double got, double want)
{
	if (want == 0)
		return fabs(got);
	return fabs(got - want) / fabs(want);
}

#define CHECK_REL(got, want, tol, what, a, b)				\
	ck_assert_msg(relerr((got), (want)) <= (tol),			\
	    "%s(%.17g, %.17g) = %.17g, want %.17g (rel err %.3g > %.3g)", \
	    (what), (double)(a), (double)(b), (got), (want),		\
	    relerr((got), (want)), (double)(tol))

/*
 * mpmath (mp.dps = 50): mp.ncdf(x); scipy: scipy.stats.norm.cdf(x).
 * Tolerance vs mpmath 1e-15 relative (measured max 2.2e-16, x = -37.5);
 * vs scipy 1e-13, scipy's own error in the far tail (measured 5.7e-14 at
 * x = -30: it rounds -x/sqrt(2) before erfc).
 */
static const struct ref1 norm_cdf_ref[] = {
	{ -37.5, 4.6053530095819552e-308, 4.6053530095819542e-308 },	/* norm.cdf(-37.5) */
	{ -30, 4.9067139271481872e-198, 4.906713927147908e-198 },	/* norm.cdf(-30) */
	{ -20, 2.7536241186062337e-89, 2.7536241186061556e-89 },	/* norm.cdf(-20) */
	{ -10, 7.6198530241605255e-24, 7.6198530241604696e-24 },	/* norm.cdf(-10) */
	{ -5, 2.8665157187919391e-07, 2.8665157187919328e-07 },	/* norm.cdf(-5) */
	{ -1, 0.15865525393145705, 0.15865525393145707 },	/* norm.cdf(-1) */
	{ 0.3, 0.61791142218895267, 0.61791142218895256 },	/* norm.cdf(0.3) */
	{ 2, 0.97724986805182079, 0.97724986805182079 },	/* norm.cdf(2) */
	{ 8, 0.99999999999999933, 0.99999999999999933 },	/* norm.cdf(8) */
};

/*
 * mpmath: root of mp.ncdf(x) = p (in logs); scipy: scipy.stats.norm.ppf(p).
 * Tolerance 1e-15 relative against both (measured max 2.1e-16 vs mpmath).
 */
static const struct ref1 norm_ppf_ref[] = {
	{ 1e-300, -37.047096299361201, -37.047096299361201 },	/* norm.ppf(1e-300) */
	{ 1e-100, -21.273453560965326, -21.273453560965322 },	/* norm.ppf(1e-100) */
	{ 1e-20, -9.262340089798407, -9.2623400897984087 },	/* norm.ppf(1e-20) */
	{ 1e-10, -6.3613409024040566, -6.3613409024040557 },	/* norm.ppf(1e-10) */
	{ 0.001, -3.0902323061678136, -3.0902323061678132 },	/* norm.ppf(0.001) */
	{ 0.025, -1.9599639845400543, -1.9599639845400545 },	/* norm.ppf(0.025) */
	{ 0.3, -0.52440051270804078, -0.52440051270804089 },	/* norm.ppf(0.3) */
	{ 0.5000001, 2.5066282733116482e-07, 2.5066282733116482e-07 },	/* norm.ppf(0.5000001) */
	{ 0.975, 1.9599639845400538, 1.959963984540054 },	/* norm.ppf(0.975) */
	{ 0.999999, 4.7534243088170873, 4.7534243088170873 },	/* norm.ppf(0.999999) */
};

/*
 * {t, nu, mpmath, scipy}. mpmath: I_x(nu/2, 1/2)/2 by mp.betainc,
 * x = nu/(nu+t^2); scipy: scipy.stats.t.cdf(t, nu). Tolerance 1e-13
 * relative against both: the tail value at |t| = 25 moves by about
 * t^2 eps = 7e-14 when t moves by one ulp (measured max 4.9e-14, t = -25,
 * nu = 1e7; all |t| <= 10 rows below 1e-15 ... 4e-15).
 */
static const struct ref2 t_cdf_ref[] = {
	{ -25, 1, 0.012725611347991831, 0.012725611347991829 },	/* t.cdf(-25, 1) */
	{ -3, 1, 0.10241638234956672, 0.10241638234956672 },	/* t.cdf(-3, 1) */
	{ -0.5, 1, 0.35241638234956674, 0.35241638234956679 },	/* t.cdf(-0.5, 1) */
	{ 1e-06, 1, 0.50000031830988623, 0.50000031830988623 },	/* t.cdf(1e-06, 1) */
	{ 2, 1, 0.85241638234956674, 0.85241638234956674 },	/* t.cdf(2, 1) */
	{ 10, 1, 0.96827448256944648, 0.96827448256944637 },	/* t.cdf(10, 1) */
	{ -25, 2, 0.00079808510570516698, 0.00079808510570516687 },	/* t.cdf(-25, 2) */
	{ -3, 2, 0.047732983133354563, 0.047732983133354556 },	/* t.cdf(-3, 2) */
	{ -0.5, 2, 0.33333333333333331, 0.33333333333333337 },	/* t.cdf(-0.5, 2) */
	{ 1e-06, 2, 0.50000035355339056, 0.50000035355339068 },	/* t.cdf(1e-06, 2) */
	{ 2, 2, 0.90824829046386302, 0.90824829046386302 },	/* t.cdf(2, 2) */
	{ 10, 2, 0.9950737714883372, 0.99507377148833709 },	/* t.cdf(10, 2) */
	{ -25, 3.5, 2.2599513810646822e-05, 2.2599513810646816e-05 },	/* t.cdf(-25, 3.5) */
	{ -3, 3.5, 0.023687619742373218, 0.023687619742373208 },	/* t.cdf(-3, 3.5) */
	{ -0.5, 3.5, 0.32342521966127552, 0.32342521966127552 },	/* t.cdf(-0.5, 3.5) */
	{ 1e-06, 3.5, 0.50000037177234369, 0.50000037177234369 },	/* t.cdf(1e-06, 3.5) */
	{ 2, 3.5, 0.93693073871204324, 0.93693073871204324 },	/* t.cdf(2, 3.5) */
	{ 10, 3.5, 0.99946426205219363, 0.99946426205219363 },	/* t.cdf(10, 3.5) */
	{ -25, 10, 1.1996963800316705e-10, 1.1996963800316708e-10 },	/* t.cdf(-25, 10) */
	{ -3, 10, 0.0066718275112847888, 0.0066718275112847827 },	/* t.cdf(-3, 10) */
	{ -0.5, 10, 0.31394680287148646, 0.31394680287148646 },	/* t.cdf(-0.5, 10) */
	{ 1e-06, 10, 0.50000038910838396, 0.50000038910838396 },	/* t.cdf(1e-06, 10) */
	{ 2, 10, 0.96330598261462985, 0.96330598261462974 },	/* t.cdf(2, 10) */
	{ 10, 10, 0.99999920522341224, 0.99999920522341224 },	/* t.cdf(10, 10) */
	{ -25, 30, 6.045911190643513e-22, 6.0459111906434876e-22 },	/* t.cdf(-25, 30) */
	{ -3, 30, 0.0026949820328259731, 0.0026949820328259718 },	/* t.cdf(-3, 30) */
	{ -0.5, 30, 0.31036150244256366, 0.31036150244256366 },	/* t.cdf(-0.5, 30) */
	{ 1e-06, 30, 0.5000003956321849, 0.5000003956321849 },	/* t.cdf(1e-06, 30) */
	{ 2, 30, 0.97268747751850848, 0.97268747751850848 },	/* t.cdf(2, 30) */
	{ 10, 30, 0.99999999997712374, 0.99999999997712374 },	/* t.cdf(10, 30) */
	{ -25, 1000, 7.6017706916606392e-108, 7.6017706916609826e-108 },	/* t.cdf(-25, 1000) */
	{ -3, 1000, 0.0013833545221190963, 0.0013833545221190939 },	/* t.cdf(-3, 1000) */
	{ -0.5, 1000, 0.3085925404169374, 0.30859254041693751 },	/* t.cdf(-0.5, 1000) */
	{ 1e-06, 1000, 0.50000039884255731, 0.50000039884255731 },	/* t.cdf(1e-06, 1000) */
	{ 2, 1000, 0.97711482675337413, 0.97711482675337413 },	/* t.cdf(2, 1000) */
	{ 10, 1000, 1, 1 },	/* t.cdf(10, 1000) */
	{ -25, 10000000.0, 3.0867886159464588e-138, 3.0867886159466211e-138 },	/* t.cdf(-25, 10000000.0) */
	{ -3, 10000000.0, 0.0013499013555185806, 0.0013499013555185806 },	/* t.cdf(-3, 10000000.0) */
	{ -0.5, 10000000.0, 0.30853754422700752, 0.30853754422700752 },	/* t.cdf(-0.5, 10000000.0) */
	{ 1e-06, 10000000.0, 0.50000039894227044, 0.50000039894227044 },	/* t.cdf(1e-06, 10000000.0) */
	{ 2, 10000000.0, 0.97724985455407853, 0.97724985455407853 },	/* t.cdf(2, 10000000.0) */
	{ 10, 10000000.0, 1, 1 },	/* t.cdf(10, 10000000.0) */
};

/*
 * {p, nu, mpmath, scipy}. mpmath: mp.findroot on the mpmath t CDF above;
 * scipy: scipy.stats.t.ppf(p, nu). Tolerance 1e-14 relative vs mpmath
 * (measured max 3.6e-15). scipy 1.10 computes t.ppf with the cdflib root
 * finder, which stops near 1e-9 relative (measured 2.1e-9 vs mpmath), so
 * the scipy column is checked at 5e-9.
 */
static const struct ref2 t_ppf_ref[] = {
	{ 0.5000001, 1, 3.1415926519363007e-07, 3.1415926511118867e-07 },	/* t.ppf(0.5000001, 1) */
	{ 0.51, 1, 0.031426266043351178, 0.031426266043351345 },	/* t.ppf(0.51, 1) */
	{ 0.975, 1, 12.706204736174694, 12.706204736432095 },	/* t.ppf(0.975, 1) */
	{ 0.995, 1, 63.656741162871526, 63.656741162873992 },	/* t.ppf(0.995, 1) */
	{ 1e-10, 1, -3183098861.8379068, -3183098861.8379068 },	/* t.ppf(1e-10, 1) */
	{ 0.5000001, 2, 2.8284271232574876e-07, 2.8284271231232117e-07 },	/* t.ppf(0.5000001, 2) */
	{ 0.51, 2, 0.028289929799333577, 0.028289929792939251 },	/* t.ppf(0.51, 2) */
	{ 0.975, 2, 4.3026527297494619, 4.3026527299112747 },	/* t.ppf(0.975, 2) */
	{ 0.995, 2, 9.9248432009182892, 9.9248432009180707 },	/* t.ppf(0.995, 2) */
	{ 1e-10, 2, -70710.678108048145, -70710.678108048145 },	/* t.ppf(1e-10, 2) */
	{ 0.5000001, 3.5, 2.6898181543979357e-07, 2.6898181554520857e-07 },	/* t.ppf(0.5000001, 3.5) */
	{ 0.51, 3.5, 0.026902352906549579, 0.026902352906522382 },	/* t.ppf(0.51, 3.5) */
	{ 0.975, 3.5, 2.9400886379827287, 2.9400886379827775 },	/* t.ppf(0.975, 3.5) */
	{ 0.995, 3.5, 5.085702223091257, 5.085702223526865 },	/* t.ppf(0.995, 3.5) */
	{ 1e-10, 3.5, -848.54334563347629, -848.54334455164565 },	/* t.ppf(1e-10, 3.5) */
	{ 0.5000001, 10, 2.5699780335778006e-07, 2.5699780340225114e-07 },	/* t.ppf(0.5000001, 10) */
	{ 0.51, 10, 0.025702893008090311, 0.025702893008090318 },	/* t.ppf(0.51, 10) */
	{ 0.975, 10, 2.2281388519862744, 2.2281388519649385 },	/* t.ppf(0.975, 10) */
	{ 0.995, 10, 3.1692726726169509, 3.169272667175838 },	/* t.ppf(0.995, 10) */
	{ 1e-10, 10, -25.466008021697725, -25.46600802066332 },	/* t.ppf(1e-10, 10) */
	{ 0.5000001, 30, 2.5276002247929695e-07, 2.5276002193917644e-07 },	/* t.ppf(0.5000001, 30) */
	{ 0.51, 30, 0.025278783971765813, 0.025278783921235629 },	/* t.ppf(0.51, 30) */
	{ 0.975, 30, 2.0422724563012378, 2.0422724563012373 },	/* t.ppf(0.975, 30) */
	{ 0.995, 30, 2.749995653567225, 2.7499956535670305 },	/* t.ppf(0.995, 30) */
	{ 1e-10, 30, -9.377489780407144, -9.377489784984645 },	/* t.ppf(1e-10, 30) */
	{ 0.5000001, 1000, 2.5072550086141689e-07, 2.5072550082683222e-07 },	/* t.ppf(0.5000001, 1000) */
	{ 0.51, 1000, 0.025075180209466443, 0.025075180209466485 },	/* t.ppf(0.51, 1000) */
	{ 0.975, 1000, 1.9623390808264081, 1.9623390808264074 },	/* t.ppf(0.975, 1000) */
	{ 0.995, 1000, 2.5807546980659506, 2.5807546980659422 },	/* t.ppf(0.995, 1000) */
	{ 1e-10, 1000, -6.4278762831342133, -6.427876283066734 },	/* t.ppf(1e-10, 1000) */
	{ 0.5000001, 10000000.0, 2.5066283359773559e-07, 2.5066283356315955e-07 },	/* t.ppf(0.5000001, 10000000.0) */
	{ 0.51, 10000000.0, 0.025068908885827638, 0.025068908885827679 },	/* t.ppf(0.51, 10000000.0) */
	{ 0.975, 10000000.0, 1.9599642217672051, 1.9599642217672051 },	/* t.ppf(0.975, 10000000.0) */
	{ 0.995, 10000000.0, 2.5758297952037488, 2.5758297952037488 },	/* t.ppf(0.995, 10000000.0) */
	{ 1e-10, 10000000.0, -6.3613474969986159, -6.3613474969986159 },	/* t.ppf(1e-10, 10000000.0) */
};

/*
 * {x, k, mpmath, scipy}. mpmath: mp.gammainc(k/2, 0, x/2, regularized);
 * scipy: scipy.stats.chi2.cdf(x, k). Tolerance 1e-14 relative against both
 * (measured max 1.7e-15).
 */
static const struct ref2 chi2_cdf_ref[] = {
	{ 0.001, 1, 0.025227120630039613, 0.025227120630039609 },	/* chi2.cdf(0.001, 1) */
	{ 0.5, 1, 0.52049987781304652, 0.52049987781304663 },	/* chi2.cdf(0.5, 1) */
	{ 3.84, 1, 0.94995647875129485, 0.94995647875129485 },	/* chi2.cdf(3.84, 1) */
	{ 1, 2, 0.39346934028736658, 0.39346934028736652 },	/* chi2.cdf(1.0, 2) */
	{ 10, 4, 0.95957231800548715, 0.95957231800548726 },	/* chi2.cdf(10, 4) */
	{ 5, 8, 0.24242386686693404, 0.2424238668669339 },	/* chi2.cdf(5, 8) */
	{ 50, 32, 0.97770697869263468, 0.97770697869263479 },	/* chi2.cdf(50, 32) */
	{ 40, 64, 0.0080917546698351158, 0.0080917546698351297 },	/* chi2.cdf(40, 64) */
	{ 120, 100.5, 0.91014989655496592, 0.91014989655496581 },	/* chi2.cdf(120, 100.5) */
};

/*
 * {p, k, mpmath, scipy}. mpmath: mp.findroot on the upper regularised
 * gamma; scipy: scipy.stats.chi2.ppf(p, k). Tolerance 1e-14 relative
 * against both (measured max 9.3e-16 vs mpmath, scipy itself 1.7e-15).
 */
static const struct ref2 chi2_ppf_ref[] = {
	{ 0.5, 1, 0.45493642311957277, 0.454936423119572 },	/* chi2.ppf(0.5, 1) */
	{ 0.95, 1, 3.8414588206941245, 3.841458820694124 },	/* chi2.ppf(0.95, 1) */
	{ 0.999, 1, 10.827566170662731, 10.827566170662733 },	/* chi2.ppf(0.999, 1) */
	{ 0.5, 2, 1.3862943611198906, 1.386294361119891 },	/* chi2.ppf(0.5, 2) */
	{ 0.95, 2, 5.9914645471079799, 5.991464547107979 },	/* chi2.ppf(0.95, 2) */
	{ 0.999, 2, 13.815510557964272, 13.815510557964274 },	/* chi2.ppf(0.999, 2) */
	{ 0.5, 4, 3.3566939800333211, 3.3566939800333224 },	/* chi2.ppf(0.5, 4) */
	{ 0.95, 4, 9.487729036781154, 9.487729036781154 },	/* chi2.ppf(0.95, 4) */
	{ 0.999, 4, 18.466826952903169, 18.466826952903169 },	/* chi2.ppf(0.999, 4) */
	{ 0.5, 8, 7.3441214977017921, 7.3441214977017939 },	/* chi2.ppf(0.5, 8) */
	{ 0.95, 8, 15.507313055865451, 15.507313055865451 },	/* chi2.ppf(0.95, 8) */
	{ 0.999, 8, 26.124481558376139, 26.124481558376139 },	/* chi2.ppf(0.999, 8) */
	{ 0.5, 16, 15.338498885001608, 15.338498885001608 },	/* chi2.ppf(0.5, 16) */
	{ 0.95, 16, 26.296227604864235, 26.296227604864232 },	/* chi2.ppf(0.95, 16) */
	{ 0.999, 16, 39.252354790768472, 39.252354790768464 },	/* chi2.ppf(0.999, 16) */
	{ 0.5, 32, 31.3358590886345, 31.335859088634486 },	/* chi2.ppf(0.5, 32) */
	{ 0.95, 32, 46.194259520278464, 46.194259520278472 },	/* chi2.ppf(0.95, 32) */
	{ 0.999, 32, 62.487219057088495, 62.487219057088474 },	/* chi2.ppf(0.999, 32) */
	{ 0.5, 64, 63.334582023531965, 63.334582023531965 },	/* chi2.ppf(0.5, 64) */
	{ 0.95, 64, 83.67526074272098, 83.675260742720965 },	/* chi2.ppf(0.95, 64) */
	{ 0.999, 64, 104.71632526304057, 104.71632526304057 },	/* chi2.ppf(0.999, 64) */
	{ 0.5, 100.5, 99.834125247617067, 99.834125247617067 },	/* chi2.ppf(0.5, 100.5) */
	{ 0.95, 100.5, 124.9003390991073, 124.9003390991073 },	/* chi2.ppf(0.95, 100.5) */
	{ 0.999, 100.5, 150.05828954512361, 150.05828954512378 },	/* chi2.ppf(0.999, 100.5) */
};

#define NELEM(a)	(sizeof(a) / sizeof((a)[0]))

START_TEST(test_dist_norm_cdf_ref)
{
	size_t i;

	for (i = 0; i < NELEM(norm_cdf_ref); i++) {
		const struct ref1 *r = &norm_cdf_ref[i];
		double v = dist_norm_cdf(r->x);

		CHECK_REL(v, r->mp, 1e-15, "norm_cdf mpmath", r->x, 0);
		CHECK_REL(v, r->sp, 1e-13, "norm_cdf scipy", r->x, 0);
	}
	/* Exact values: Phi(0) = 1/2, Phi(+-inf) = 1, 0. */
	ck_assert(dist_norm_cdf(0) == 0.5);
	ck_assert(dist_norm_cdf(INFINITY) == 1);
	ck_assert(dist_norm_cdf(-INFINITY) == 0);
}
END_TEST

START_TEST(test_dist_norm_quantile_ref)
{
	size_t i;

	for (i = 0; i < NELEM(norm_ppf_ref); i++) {
		const struct ref1 *r = &norm_ppf_ref[i];
		double v = dist_norm_quantile(r->x);

		CHECK_REL(v, r->mp, 1e-15, "norm_quantile mpmath", r->x, 0);
		CHECK_REL(v, r->sp, 1e-15, "norm_quantile scipy", r->x, 0);
	}
	ck_assert(dist_norm_quantile(0.5) == 0);
	/* Symmetry x(1 - p) = -x(p), exact when 1 - p is a double. */
	ck_assert(dist_norm_quantile(0.875) == -dist_norm_quantile(0.125));
}
END_TEST

START_TEST(test_dist_t_cdf_ref)
{
	size_t i;

	for (i = 0; i < NELEM(t_cdf_ref); i++) {
		const struct ref2 *r = &t_cdf_ref[i];
		double v = dist_t_cdf(r->x, r->par);

		CHECK_REL(v, r->mp, 1e-13, "t_cdf mpmath", r->x, r->par);
		CHECK_REL(v, r->sp, 1e-13, "t_cdf scipy", r->x, r->par);
	}
}
END_TEST

START_TEST(test_dist_t_quantile_ref)
{
	size_t i;

	for (i = 0; i < NELEM(t_ppf_ref); i++) {
		const struct ref2 *r = &t_ppf_ref[i];
		double v = dist_t_quantile(r->x, r->par);

		CHECK_REL(v, r->mp, 1e-14, "t_quantile mpmath", r->x, r->par);
		CHECK_REL(v, r->sp, 5e-9, "t_quantile scipy", r->x, r->par);
	}
}
END_TEST

/*
 * Closed forms (Abramowitz & Stegun 26.7.3-26.7.4 special cases, recalled;
 * both follow by integrating the density directly): nu = 1 is the Cauchy
 * law, F(t) = 1/2 + atan(t)/pi; nu = 2 has F(t) = 1/2 + t / (2 sqrt(2 + t^2))
 * and quantile (2p - 1) / sqrt(2 p (1 - p)). Tolerance 4e-15 relative (the
 * closed forms themselves round in a few places).
 */
START_TEST(test_dist_t_closed_forms)
{
	static const double ts[] = { -3, -0.5, 0.7, 5, 40 };
	static const double ps[] = { 1e-6, 0.01, 0.3, 0.6, 0.99 };
	size_t i;
	double t, p;

	for (i = 0; i < NELEM(ts); i++) {
		t = ts[i];
		CHECK_REL(dist_t_cdf(t, 1), 0.5 + atan(t) / M_PI, 4e-15,
		    "t_cdf cauchy", t, 1);
		CHECK_REL(dist_t_cdf(t, 2), 0.5 + t / (2 * sqrt(2 + t * t)),
		    4e-15, "t_cdf nu=2", t, 2);
	}
	for (i = 0; i < NELEM(ps); i++) {
		p = ps[i];
		CHECK_REL(dist_t_quantile(p, 2),
		    (2 * p - 1) / sqrt(2 * p * (1 - p)), 4e-15,
		    "t_quantile nu=2", p, 2);
	}
}
END_TEST

/*
 * Large nu: nu = inf is the normal law exactly; for nu = 1e9 the
 * Cornish-Fisher expansion (Abramowitz & Stegun 26.7.5, recalled from
 * memory) gives t = z + z (z^2 + 1) / (4 nu) + O(nu^-2), the O(nu^-2) term
 * being ~1e-18 here. Tolerance 1e-15 relative.
 */
START_TEST(test_dist_t_large_nu)
{
	static const double ps[] = { 1e-10, 0.025, 0.3, 0.975, 0.995 };
	size_t i;
	double z, p;

	for (i = 0; i < NELEM(ps); i++) {
		p = ps[i];
		z = dist_norm_quantile(p);
		ck_assert(dist_t_quantile(p, INFINITY) == z);
		ck_assert(dist_t_cdf(z, INFINITY) == dist_norm_cdf(z));
		CHECK_REL(dist_t_quantile(p, 1e9),
		    z + z * (z * z + 1) / 4e9, 1e-15, "t_quantile", p, 1e9);
	}
}
END_TEST

START_TEST(test_dist_chi2_cdf_ref)
{
	size_t i;

	for (i = 0; i < NELEM(chi2_cdf_ref); i++) {
		const struct ref2 *r = &chi2_cdf_ref[i];
		double v = dist_chi2_cdf(r->x, r->par);

		CHECK_REL(v, r->mp, 1e-14, "chi2_cdf mpmath", r->x, r->par);
		CHECK_REL(v, r->sp, 1e-14, "chi2_cdf scipy", r->x, r->par);
	}
	ck_assert(dist_chi2_cdf(0, 3) == 0);
	ck_assert(dist_chi2_cdf(-1, 3) == 0);
	ck_assert(dist_chi2_cdf(INFINITY, 3) == 1);
}
END_TEST

START_TEST(test_dist_chi2_quantile_ref)
{
	size_t i;

	for (i = 0; i < NELEM(chi2_ppf_ref); i++) {
		const struct ref2 *r = &chi2_ppf_ref[i];
		double v = dist_chi2_quantile(r->x, r->par);

		CHECK_REL(v, r->mp, 1e-14, "chi2_quantile mpmath", r->x,
		    r->par);
		CHECK_REL(v, r->sp, 1e-14, "chi2_quantile scipy", r->x,
		    r->par);
	}
}
END_TEST

/*
 * Closed forms: k = 2 is the exponential law with mean 2,
 * F(x) = 1 - e^(-x/2), quantile -2 ln(1 - p); k = 1 is the square of a
 * standard normal, F(x) = erf(sqrt(x/2)) (Abramowitz & Stegun 26.4.4 and
 * 26.4.23 special cases; both follow from the densities). Tolerance 4e-15.
 */
START_TEST(test_dist_chi2_closed_forms)
{
	static const double xs[] = { 1e-8, 0.1, 1, 5, 30 };
	static const double ps[] = { 1e-12, 0.01, 0.5, 0.9, 0.999999 };
	size_t i;

	for (i = 0; i < NELEM(xs); i++) {
		CHECK_REL(dist_chi2_cdf(xs[i], 2), -expm1(-xs[i] / 2), 4e-15,
		    "chi2_cdf k=2", xs[i], 2);
		if (xs[i] < 10)		/* erf rounds to 1 beyond */
			CHECK_REL(dist_chi2_cdf(xs[i], 1), erf(sqrt(xs[i] / 2)),
			    4e-15, "chi2_cdf k=1", xs[i], 1);
	}
	for (i = 0; i < NELEM(ps); i++)
		CHECK_REL(dist_chi2_quantile(ps[i], 2), -2 * log1p(-ps[i]),
		    4e-15, "chi2_quantile k=2", ps[i], 2);
}
END_TEST

/*
 * NUMERICS.md section 6, coefficient-drift alarm levels chi^2_p(0.999),
 * printed to 2 decimals: check to those digits (|x - printed| <= 0.005).
 */
START_TEST(test_dist_chi2_numerics_table)
{
	static const struct {
		double	p;
		double	q;
	} tab[] = {
		{ 1, 10.83 }, { 2, 13.82 }, { 4, 18.47 }, { 8, 26.12 },
		{ 16, 39.25 }, { 32, 62.49 }, { 64, 104.72 },
	};
	size_t i;
	double v;

	for (i = 0; i < NELEM(tab); i++) {
		v = dist_chi2_quantile(0.999, tab[i].p);
		ck_assert_msg(fabs(v - tab[i].q) <= 0.005,
		    "chi2_quantile(0.999, %g) = %.6f, NUMERICS says %.2f",
		    tab[i].p, v, tab[i].q);
	}
}
END_TEST

/*
 * NUMERICS.md section 7, two-sided CUSUM ARL for k = 0.5 (S_0 = 0),
 * printed to 4 significant digits: relative tolerance 1e-3.
 */
START_TEST(test_dist_cusum_arl_numerics_table)
{
	static const double delta[10] = {
		0, 0.25, 0.5, 0.75, 1, 1.5, 2, 2.5, 3, 4 };
	static const double h4[10] = {
		167.7, 74.22, 26.63, 13.29, 8.383, 4.747, 3.343, 2.620,
		2.194, 1.708 };
	static const double h5[10] = {
		465.4, 139.5, 38.00, 17.05, 10.38, 5.747, 4.009, 3.114,
		2.573, 2.013 };
	double arl;
	int i;

	for (i = 0; i < 10; i++) {
		ck_assert_int_eq(dist_cusum_arl(0.5, 4, delta[i], &arl), 0);
		CHECK_REL(arl, h4[i], 1e-3, "cusum_arl h=4", 4, delta[i]);
		ck_assert_int_eq(dist_cusum_arl(0.5, 5, delta[i], &arl), 0);
		CHECK_REL(arl, h5[i], 1e-3, "cusum_arl h=5", 5, delta[i]);
	}
	/* The two sides are mirror images: ARL(-delta) = ARL(delta). */
	{
		double a1, a2;

		ck_assert_int_eq(dist_cusum_arl(0.5, 4, 0.75, &a1), 0);
		ck_assert_int_eq(dist_cusum_arl(0.5, 4, -0.75, &a2), 0);
		CHECK_REL(a1, a2, 1e-14, "cusum_arl mirror", 4, 0.75);
	}
}
END_TEST

/*
 * An independent discretisation of the same quantity: the Brook & Evans
 * (1972, Biometrika 59) Markov-chain approximation with m = 400, 800, 1600
 * states and two Richardson steps (error O(m^-2), O(m^-4)), computed with
 * numpy/scipy by tests/ref/dist_ref.py: {k, h, delta, arl}. Relative
 * tolerance 1e-7, i.e. the 7 significant digits the API promises; the
 * extrapolated chain is itself only good to ~3e-8 at ARL 1e6 (the last two
 * Richardson steps differ by 2e-7 there), so tighter is not meaningful.
 */
START_TEST(test_dist_cusum_arl_markov_chain)
{
	static const struct {
		double	k;
		double	h;
		double	delta;
		double	arl;
	} tab[] = {
		{ 0.5, 4, 0, 167.6837889 },
		{ 0.5, 5, 1.0, 10.37596992 },
		{ 0.5, 12.657, 0, 999789.8293 },
	};
	size_t i;
	double arl;

	for (i = 0; i < NELEM(tab); i++) {
		ck_assert_int_eq(dist_cusum_arl(tab[i].k, tab[i].h,
		    tab[i].delta, &arl), 0);
		CHECK_REL(arl, tab[i].arl, 1e-7, "cusum_arl markov", tab[i].h,
		    tab[i].delta);
	}
}
END_TEST

/*
 * The same integral equation and quadrature solved in 30-digit arithmetic
 * with mpmath (mp.lu_solve, 40-80 nodes, converged), by
 * tests/ref/dist_ref.py: {k, h, delta, arl}. This measures the rounding
 * error of the double-precision solve, which grows with the ARL (the system
 * I - K is nearly singular, its smallest singular value ~ 1/ARL): measured
 * 6e-14 at ARL 168, 3.5e-10 at 1e6, 1.3e-6 at 1e9. Tolerance 1e-9 up to
 * ARL 1e6, 1e-5 for the 1e9 row.
 */
START_TEST(test_dist_cusum_arl_extended_precision)
{
	static const struct {
		double	k;
		double	h;
		double	delta;
		double	arl;
	} tab[] = {
		{ 0.5, 4, 0, 167.68378881361556 },
		{ 0.5, 8, 0.5, 84.000623808576873 },
		{ 0.5, 12.657, 0, 999789.80128367713 },
		{ 0.5, 19.565, 0, 1000049325.5587926 },
	};
	size_t i;
	double arl;

	for (i = 0; i < NELEM(tab); i++) {
		ck_assert_int_eq(dist_cusum_arl(tab[i].k, tab[i].h,
		    tab[i].delta, &arl), 0);
		CHECK_REL(arl, tab[i].arl, tab[i].arl < 1e7 ? 1e-9 : 1e-5,
		    "cusum_arl mpmath", tab[i].h, tab[i].delta);
	}
}
END_TEST

/*
 * Siegmund's (1985, Sequential Analysis) corrected diffusion approximation
 * to the one-sided ARL, (e^(-2 D b) + 2 D b - 1) / (2 D^2) with D = delta - k
 * and b = h + 1.166 (formula as given in NUMERICS.md section 7), combined
 * over the two sides. It is an approximation, NOT exact: used only as a
 * loose sanity check, within 2 %, where it is known to be good (small
 * shifts; measured deviation 0.03 % ... 0.8 %). It degrades for large
 * shifts (16 % at delta = 4), which is not checked.
 */
static double
siegmund1(double D, double b)
{
	if (D == 0)
		return b * b;
	return (exp(-2 * D * b) + 2 * D * b - 1) / (2 * D * D);
}

START_TEST(test_dist_cusum_arl_siegmund)
{
	static const double hs[] = { 4, 5 };
	static const double ds[] = { 0, 0.25, 0.5, 1 };
	size_t i, j;
	double b, s, arl, k = 0.5;

	for (i = 0; i < NELEM(hs); i++)
		for (j = 0; j < NELEM(ds); j++) {
			b = hs[i] + 1.166;
			s = 1 / (1 / siegmund1(ds[j] - k, b) +
			    1 / siegmund1(-ds[j] - k, b));
			ck_assert_int_eq(dist_cusum_arl(k, hs[i], ds[j], &arl),
			    0);
			CHECK_REL(arl, s, 0.02, "cusum_arl siegmund", hs[i],
			    ds[j]);
		}
}
END_TEST

/*
 * NUMERICS.md section 7: two-sided h for a target in-control ARL, k = 0.5,
 * printed to 3 decimals: check |h - printed| < 5e-4, and that the ARL at
 * the returned h is the target (1e-6 relative, solver and ARL accuracy).
 * Exception: NUMERICS prints 370 -> 4.775, but ARL0(4.775) = 370.44 both
 * here and with the Brook-Evans chain above (m up to 2000, Richardson:
 * 370.4388), while ARL0(4.77383) = 370.000 by both methods, so the 3-decimal
 * value is 4.774; checked against that, reported upstream.
 */
START_TEST(test_dist_cusum_h_for_arl)
{
	static const struct {
		double	arl0;
		double	h;
	} tab[] = {
		{ 370, 4.774 }, { 500, 5.071 }, { 1e3, 5.757 },
		{ 1e4, 8.053 }, { 1e5, 10.355 }, { 1e6, 12.657 },
	};
	size_t i;
	double h, arl;

	for (i = 0; i < NELEM(tab); i++) {
		ck_assert_int_eq(dist_cusum_h_for_arl(0.5, tab[i].arl0, &h), 0);
		ck_assert_msg(fabs(h - tab[i].h) < 5e-4,
		    "h_for_arl(%g) = %.6f, want %.3f", tab[i].arl0, h,
		    tab[i].h);
		ck_assert_int_eq(dist_cusum_arl(0.5, h, 0, &arl), 0);
		CHECK_REL(arl, tab[i].arl0, 1e-6, "arl at h", tab[i].arl0, h);
	}
}
END_TEST

START_TEST(test_dist_bad_args)
{
	double v = 12345, h = 12345;

	/* quantiles: p outside (0, 1), NAN */
	ck_assert(isnan(dist_norm_quantile(0)));
	ck_assert(isnan(dist_norm_quantile(1)));
	ck_assert(isnan(dist_norm_quantile(-0.1)));
	ck_assert(isnan(dist_norm_quantile(1.5)));
	ck_assert(isnan(dist_norm_quantile(NAN)));
	ck_assert(isnan(dist_norm_cdf(NAN)));
	ck_assert(isnan(dist_t_quantile(0, 5)));
	ck_assert(isnan(dist_t_quantile(1, 5)));
	ck_assert(isnan(dist_t_quantile(NAN, 5)));
	ck_assert(isnan(dist_chi2_quantile(0, 5)));
	ck_assert(isnan(dist_chi2_quantile(1, 5)));
	ck_assert(isnan(dist_chi2_quantile(2, 5)));
	ck_assert(isnan(dist_chi2_quantile(NAN, 5)));
	/* degrees of freedom <= 0, NAN (and infinite for chi-square) */
	ck_assert(isnan(dist_t_cdf(1, 0)));
	ck_assert(isnan(dist_t_cdf(1, -2)));
	ck_assert(isnan(dist_t_cdf(1, NAN)));
	ck_assert(isnan(dist_t_cdf(NAN, 3)));
	ck_assert(isnan(dist_t_quantile(0.3, 0)));
	ck_assert(isnan(dist_t_quantile(0.3, -1)));
	ck_assert(isnan(dist_t_quantile(0.3, NAN)));
	ck_assert(isnan(dist_chi2_cdf(1, 0)));
	ck_assert(isnan(dist_chi2_cdf(1, -3)));
	ck_assert(isnan(dist_chi2_cdf(1, INFINITY)));
	ck_assert(isnan(dist_chi2_cdf(NAN, 3)));
	ck_assert(isnan(dist_chi2_quantile(0.3, 0)));
	ck_assert(isnan(dist_chi2_quantile(0.3, -1)));
	/* CUSUM: h <= 0 or too large, k < 0, non-finite, NULL; *arl kept */
	ck_assert_int_eq(dist_cusum_arl(0.5, 0, 0, &v), E_ARG);
	ck_assert_int_eq(dist_cusum_arl(0.5, -1, 0, &v), E_ARG);
	ck_assert_int_eq(dist_cusum_arl(0.5, NAN, 0, &v), E_ARG);
	ck_assert_int_eq(dist_cusum_arl(0.5, DIST_CUSUM_HMAX * 1.01, 0, &v),
	    E_ARG);
	ck_assert_int_eq(dist_cusum_arl(-0.1, 4, 0, &v), E_ARG);
	ck_assert_int_eq(dist_cusum_arl(NAN, 4, 0, &v), E_ARG);
	ck_assert_int_eq(dist_cusum_arl(0.5, 4, NAN, &v), E_ARG);
	ck_assert_int_eq(dist_cusum_arl(0.5, 4, INFINITY, &v), E_ARG);
	ck_assert_int_eq(dist_cusum_arl(0.5, 4, 0, NULL), E_ARG);
	ck_assert(v == 12345);
	/* beyond what the linear system can resolve: refused, not garbage */
	ck_assert_int_eq(dist_cusum_arl(3, 40, 0, &v), E_NUMERIC);
	ck_assert(v == 12345);
	/*
	 * h search: arl0 <= 1, at or below the h -> 0 limit
	 * 1/(2 Phi(-k)) = 1.62 for k = 0.5, above the cap, NAN, k < 0, NULL
	 */
	ck_assert_int_eq(dist_cusum_h_for_arl(0.5, 1, &h), E_ARG);
	ck_assert_int_eq(dist_cusum_h_for_arl(0.5, 1.6, &h), E_ARG);
	ck_assert_int_eq(dist_cusum_h_for_arl(0.5, DIST_CUSUM_ARL0_MAX * 2,
	    &h), E_ARG);
	ck_assert_int_eq(dist_cusum_h_for_arl(0.5, NAN, &h), E_ARG);
	ck_assert_int_eq(dist_cusum_h_for_arl(-1, 500, &h), E_ARG);
	ck_assert_int_eq(dist_cusum_h_for_arl(0.5, 500, NULL), E_ARG);
	ck_assert(h == 12345);
}
END_TEST

Suite *
dist_suite(void)
{
	Suite *s = suite_create("dist");
	TCase *tc;

	tc = tcase_create("normal");
	tcase_add_test(tc, test_dist_norm_cdf_ref);
	tcase_add_test(tc, test_dist_norm_quantile_ref);
	suite_add_tcase(s, tc);

	tc = tcase_create("student");
	tcase_add_test(tc, test_dist_t_cdf_ref);
	tcase_add_test(tc, test_dist_t_quantile_ref);
	tcase_add_test(tc, test_dist_t_closed_forms);
	tcase_add_test(tc, test_dist_t_large_nu);
	suite_add_tcase(s, tc);

	tc = tcase_create("chisq");
	tcase_add_test(tc, test_dist_chi2_cdf_ref);
	tcase_add_test(tc, test_dist_chi2_quantile_ref);
	tcase_add_test(tc, test_dist_chi2_closed_forms);
	tcase_add_test(tc, test_dist_chi2_numerics_table);
	suite_add_tcase(s, tc);

	tc = tcase_create("cusum");
	tcase_add_test(tc, test_dist_cusum_arl_numerics_table);
	tcase_add_test(tc, test_dist_cusum_arl_markov_chain);
	tcase_add_test(tc, test_dist_cusum_arl_extended_precision);
	tcase_add_test(tc, test_dist_cusum_arl_siegmund);
	tcase_add_test(tc, test_dist_cusum_h_for_arl);
	suite_add_tcase(s, tc);

	tc = tcase_create("args");
	tcase_add_test(tc, test_dist_bad_args);
	suite_add_tcase(s, tc);
	return s;
}
