/* SPDX-License-Identifier: ISC */
/*
 * dist: normal, Student t and chi-square CDFs and quantiles, and the average
 * run length (ARL) of a two-sided CUSUM. Pure: no I/O, no globals (lgamma_r,
 * not lgamma, so signgam is never written), no allocation (fixed-size stack
 * arrays). Called for queries and at config load, never per record. Does not
 * cover other distributions (F, beta) or detectors other than the CUSUM.
 */
#include <float.h>
#include <math.h>
#include <stddef.h>

#include <lapacke.h>

#include "dist.h"
#include "err.h"
#include "limits.h"

#define LN_SQRT_2PI	0.91893853320467274178	/* ln sqrt(2 pi) */
#define SQRT_2PI	2.50662827463100050242	/* sqrt(2 pi) */
/* 1/sqrt(2) - M_SQRT1_2: the rounding error of the double constant. */
#define SQRT1_2_LO	(-4.8336466567264565e-17)

#define SERIES_ITMAX	1000000	/* incomplete gamma/beta expansions */
#define ROOT_ITMAX	200	/* quantile root finder */
#define TINY		1e-300	/* modified Lentz guard */
#define TEMME_A		20.0	/* I_x(a,b): asymptotic form from this a */
#define TEMME_KMAX	40	/* terms of that asymptotic form */

/* Gauss-Legendre nodes for the CUSUM integral equation (see cusum_arl1). */
#define CUSUM_NMAX	100
/* One-sided ARLs above this are treated as infinite (see dist_cusum_arl). */
#define CUSUM_ARL_BIG	1e12

/* ------------------------------------------------------------------ */
/* Gamma function pieces                                              */
/* ------------------------------------------------------------------ */

/*
 * Stirling remainder delta(z) = lnGamma(z) - [(z - 1/2) ln z - z + ln sqrt(2 pi)]
 * (Abramowitz & Stegun 6.1.40-41). For z >= 10 the Bernoulli series up to
 * z^-13 (the next term is below 3e-17 there); below 10 the difference with
 * lgamma_r, whose terms are too small there to cancel badly. Splitting
 * lnGamma this way lets the callers cancel the large (z ln z) parts
 * analytically, which is what keeps the t and chi-square functions accurate
 * for large degrees of freedom.
 */
static double
stirling_delta(double z)
{
	double r, r2;
	int sg;

	if (z >= 10) {
		r = 1 / z;
		r2 = r * r;
		return r * (1.0 / 12 + r2 * (-1.0 / 360 + r2 * (1.0 / 1260 +
		    r2 * (-1.0 / 1680 + r2 * (1.0 / 1188 +
		    r2 * (-691.0 / 360360 + r2 / 156))))));
	}
	return lgamma_r(z, &sg) - ((z - 0.5) * log(z) - z + LN_SQRT_2PI);
}

/*
 * ln(x^a e^-x / Gamma(a)) for a > 0, x > 0, as
 * a ln(x/a) - (x - a) + ln sqrt(a / 2 pi) - delta(a), with ln(x/a) from log1p
 * near x = a, so that no term of size a ln a is ever formed.
 */
static double
gamma_logfront(double a, double x)
{
	double d = x - a, t;

	if (fabs(d) < 0.5 * a)
		t = a * log1p(d / a) - d;
	else
		t = a * (log(x) - log(a)) - d;
	return t + 0.5 * log(a) - LN_SQRT_2PI - stirling_delta(a);
}

/*
 * Regularised incomplete gamma P(a,x), Q(a,x) = 1 - P(a,x), and the front
 * factor x^a e^-x / Gamma(a) (x times the gamma density, i.e. dP/d ln x).
 * Power series for x < a + 1, Legendre's continued fraction by the modified
 * Lentz method otherwise (Press et al., Numerical Recipes, 3rd ed., 6.2).
 * The directly computed one of P and Q is accurate to a few ulps relative
 * (up to the conditioning of x^a e^-x); the other is 1 minus it. For a < 1
 * the front is formed as a x^a e^-x / Gamma(a+1), whose logarithm has no
 * large terms (lgamma(a) ~ -ln a would cost ~1e-15 absolute in P, which the
 * quantile magnifies by 1/a). Returns NAN in P and Q if an expansion fails
 * to converge (only for a beyond about 1e10).
 */
static void
inc_gamma(double a, double x, double *P, double *Q, double *front)
{
	double f, f1, sum, term, b, c, d, h, an, del;
	int n, sg;

	if (x <= 0) {
		*P = 0;
		*Q = 1;
		*front = 0;
		return;
	}
	if (isinf(x)) {
		*P = 1;
		*Q = 0;
		*front = 0;
		return;
	}
	if (a < 1) {
		f1 = exp(a * log(x) - x - lgamma_r(a + 1, &sg));
		f = a * f1;
	} else {
		f = exp(gamma_logfront(a, x));
		f1 = f / a;
	}
	*front = f;
	if (x < a + 1) {
		/* P = x^a e^-x / Gamma(a+1) * sum_n x^n / ((a+1)...(a+n)) */
		sum = term = 1;
		for (n = 1; n < SERIES_ITMAX; n++) {
			term *= x / (a + n);
			sum += term;
			if (term <= sum * (DBL_EPSILON / 4))
				break;
		}
		if (n == SERIES_ITMAX) {
			*P = *Q = NAN;
			return;
		}
		*P = fmin(1, f1 * sum);
		*Q = 1 - *P;
		return;
	}
	b = x + 1 - a;
	c = 1 / TINY;
	d = 1 / b;
	h = d;
	for (n = 1; n < SERIES_ITMAX; n++) {
		an = -n * (n - a);
		b += 2;
		d = an * d + b;
		if (fabs(d) < TINY)
			d = TINY;
		c = b + an / c;
		if (fabs(c) < TINY)
			c = TINY;
		d = 1 / d;
		del = d * c;
		h *= del;
		if (fabs(del - 1) <= DBL_EPSILON / 2)
			break;
	}
	if (n == SERIES_ITMAX) {
		*P = *Q = NAN;
		return;
	}
	*Q = fmin(1, f * h);
	*P = 1 - *Q;
}

/* ------------------------------------------------------------------ */
/* Incomplete beta                                                    */
/* ------------------------------------------------------------------ */

/*
 * a ln(x (a + b) / a) = a (ln x + ln(1 + b/a)), the a-part of beta_logfront.
 * For a > b both logarithms are small and are added; for a <= b they can
 * be large and opposite (x tiny, b/a huge, as for Student t with huge nu),
 * so the product x (1 + b/a) is formed first when it is a normal number.
 */
static double
beta_logpart(double a, double b, double x, double lx)
{
	double u;

	if (a <= b) {
		u = x * (1 + b / a);
		if (u >= DBL_MIN && u < INFINITY)
			return a * log(u);
	}
	return a * (lx + log1p(b / a));
}

/*
 * ln(x^a y^b / B(a,b)), y = 1 - x, given also lx = ln x and ly = ln y. With
 * c = a + b and Stirling's form of the three lnGamma terms this is
 *   a ln(x c/a) + b ln(y c/b) + ln sqrt(a b / c)
 *   - ln sqrt(2 pi) - delta(a) - delta(b) + delta(c),
 * in which the a ln a terms have cancelled exactly (compare the lgamma
 * difference, which loses ~ log10(a) digits for large a); ab/c is formed
 * as min(a,b) / (1 + min/max) for the same reason.
 */
static double
beta_logfront(double a, double b, double x, double y, double lx, double ly)
{
	double lab;

	if (a >= b)
		lab = log(b) - log1p(b / a);
	else
		lab = log(a) - log1p(a / b);
	return beta_logpart(a, b, x, lx) + beta_logpart(b, a, y, ly) +
	    0.5 * lab - LN_SQRT_2PI -
	    stirling_delta(a) - stirling_delta(b) + stirling_delta(a + b);
}

/*
 * Continued fraction for I_x(a,b) (Press et al., Numerical Recipes, 3rd ed.,
 * 6.4, eq. 6.4.5, modified Lentz); I_x(a,b) = front * cf / a. It converges
 * fast for x < (a + 1)/(a + b + 2). The first denominator
 * 1 - (a + b) x / (a + 1) is formed as (a y + 1 - b x)/(a + 1) from the
 * separately known y = 1 - x so it carries no cancellation of its own.
 * Returns NAN if it fails to converge.
 */
static double
beta_cf(double a, double b, double x, double y)
{
	double c, d, h, aa, del, m2;
	int m;

	c = 1;
	d = (a * y + 1 - b * x) / (a + 1);
	if (fabs(d) < TINY)
		d = TINY;
	d = 1 / d;
	h = d;
	for (m = 1; m < SERIES_ITMAX; m++) {
		m2 = 2.0 * m;
		aa = m * (b - m) * x / ((a - 1 + m2) * (a + m2));
		d = 1 + aa * d;
		if (fabs(d) < TINY)
			d = TINY;
		c = 1 + aa / c;
		if (fabs(c) < TINY)
			c = TINY;
		d = 1 / d;
		h *= d * c;
		aa = -(a + m) * (a + b + m) * x / ((a + m2) * (a + 1 + m2));
		d = 1 + aa * d;
		if (fabs(d) < TINY)
			d = TINY;
		c = 1 + aa / c;
		if (fabs(c) < TINY)
			c = TINY;
		d = 1 / d;
		del = d * c;
		h *= del;
		if (fabs(del - 1) <= DBL_EPSILON / 2)
			return h;
	}
	return NAN;
}

/*
 * I_x(a,b) for large a and b <= 1 near x = 1, where the continued fraction
 * would lose about log10(a) digits. With u = -ln X and nu = a + (b - 1)/2,
 *   I_x(a,b) = 1/B(a,b) * int_w^inf e^(-nu u) u^(b-1) g(u) du,  w = -ln x,
 *   g(u) = (sinh(u/2) / (u/2))^(b-1) = sum_k g_k u^(2k),
 * so, integrating term by term (Temme, "Special Functions", 1996, 11.3.3; the
 * expansion used by DiDonato & Morris, ACM TOMS 18 (1992) 360, BGRAT),
 *   I_x(a,b) = Gamma(a+b) / (Gamma(a) nu^b) * sum_k g_k (b)_2k / nu^2k Q(b+2k, nu w),
 * Q the regularised upper incomplete gamma. The g_k follow from the series of
 * sinh(v)/v by the power recurrence G = F^(b-1), F G' = (b-1) F' G; Q(s, z)
 * steps up by Q(s+1, z) = Q(s, z) + z^s e^-z / Gamma(s+1). The series is
 * asymptotic in 1/nu but, for a >= 20 and w < 1 (where it is used), its terms
 * fall by (w / 2 pi)^2 or faster and it reaches full precision in a few terms.
 * Returns I_x(a,b); lx = ln x.
 */
static double
beta_temme(double a, double b, double lx)
{
	double f[TEMME_KMAX], g[TEMME_KMAX];
	double w = -lx, nu = a + 0.5 * (b - 1), z = nu * w;
	double lnR, Qk, Ds, s, ck, sum, term, acc, Pb, fr;
	int j, k, sg;

	f[0] = g[0] = 1;
	for (k = 1; k < TEMME_KMAX; k++) {
		/* f_k = 1 / ((2k+1)! 4^k), the u^2k coefficient of sinh(u/2)/(u/2) */
		f[k] = f[k - 1] / (4.0 * (2 * k) * (2 * k + 1));
		acc = 0;
		for (j = 1; j <= k; j++)
			acc += (b * j - k) * f[j] * g[k - j];
		g[k] = acc / k;
	}
	/* ln[Gamma(a+b) / (Gamma(a) nu^b)] with the a ln a parts cancelled */
	lnR = (a - 0.5) * log1p(b / a) - b + b * log1p(0.5 * (b + 1) / nu) +
	    stirling_delta(a + b) - stirling_delta(a);
	if (b == 0.5)
		Qk = erfc(sqrt(z));
	else
		inc_gamma(b, z, &Pb, &Qk, &fr);
	Ds = z > 0 ? exp(b * log(z) - z - lgamma_r(b + 1, &sg)) : 0;
	s = b;
	ck = 1;
	sum = Qk;
	for (k = 1; k < TEMME_KMAX; k++) {
		Qk += Ds;
		Ds *= z / (s + 1);
		s += 1;
		Qk += Ds;
		Ds *= z / (s + 1);
		s += 1;
		ck *= (s - 2) * (s - 1) / (nu * nu);
		term = g[k] * ck * Qk;
		sum += term;
		if (fabs(term) <= sum * (DBL_EPSILON / 8))
			break;
	}
	return exp(lnR) * sum;
}

/*
 * Regularised incomplete beta ib = I_x(a,b), ibc = 1 - ib, and the front factor
 * x^a y^b / B(a,b), for a, b > 0, given x, y = 1 - x and their logarithms
 * lx, ly (passed so that callers can supply x or y underflowing to 0 while the
 * logarithm is still exact). The smaller of ib, ibc is computed directly:
 * continued fraction on the side where it converges (Numerical Recipes 6.4),
 * or, for a >= 20, b <= 1 and x > 1/e, the asymptotic form of beta_temme.
 * The other is 1 minus it.
 */
static void
inc_beta(double a, double b, double x, double y, double lx, double ly,
    double *ib, double *ibc, double *front)
{
	double f;

	if (lx == -INFINITY) {
		*ib = 0;
		*ibc = 1;
		*front = 0;
		return;
	}
	if (ly == -INFINITY) {
		*ib = 1;
		*ibc = 0;
		*front = 0;
		return;
	}
	f = exp(beta_logfront(a, b, x, y, lx, ly));
	*front = f;
	if (a >= TEMME_A && b <= 1) {
		if ((a + b) * y < 0.5 * (b + 1)) {
			*ibc = fmin(1, f * beta_cf(b, a, y, x) / b);
			*ib = 1 - *ibc;
		} else if (lx > -1) {
			*ib = fmin(1, beta_temme(a, b, lx));
			*ibc = 1 - *ib;
		} else {
			*ib = fmin(1, f * beta_cf(a, b, x, y) / a);
			*ibc = 1 - *ib;
		}
		return;
	}
	if (x < (a + 1) / (a + b + 2)) {
		*ib = fmin(1, f * beta_cf(a, b, x, y) / a);
		*ibc = 1 - *ib;
	} else {
		*ibc = fmin(1, f * beta_cf(b, a, y, x) / b);
		*ib = 1 - *ibc;
	}
}

/* ------------------------------------------------------------------ */
/* Root finding for the quantiles                                     */
/* ------------------------------------------------------------------ */

/*
 * Solve h(x) = 0 for x > 0, h increasing in x; eval returns h(x) and
 * dh/d(ln x). Newton's method in ln x (tail probabilities are close to
 * power laws or exponentials in ln x, so the steps are nearly exact there),
 * applied as x <- x + x expm1(step) so the result is not limited by the
 * precision of ln x, safeguarded by a bracket [lo, hi] of points already
 * evaluated: a step leaving the bracket is replaced by a geometric bisection,
 * or by a factor-16 move while one side is still open. Stops when the step is
 * below 2 eps, or below 1e-12 without halving (the evaluation noise floor).
 */
static double
solve_pos(double (*eval)(double, const void *, double *), const void *ctx,
    double x)
{
	double lo = 0, hi = INFINITY, h, dh, r, xn, rprev = INFINITY;
	int it;

	for (it = 0; it < ROOT_ITMAX; it++) {
		h = eval(x, ctx, &dh);
		if (isnan(h))
			return NAN;
		if (h == 0)
			return x;
		if (h < 0)
			lo = x;
		else
			hi = x;
		r = -h / dh;
		xn = x + x * expm1(r);
		if (!(xn > lo && xn < hi)) {
			if (lo > 0 && hi < INFINITY)
				xn = sqrt(lo) * sqrt(hi);
			else if (lo > 0)
				xn = lo * 16;
			else
				xn = hi / 16;
			r = NAN;
		}
		if (fabs(r) <= 2 * DBL_EPSILON ||
		    (fabs(r) < 1e-12 && fabs(r) > 0.5 * fabs(rprev)))
			return xn;
		if (lo > 0 && hi - lo <= 2 * DBL_EPSILON * lo)
			return xn;
		rprev = r;
		x = xn;
	}
	return x;
}

/* ------------------------------------------------------------------ */
/* Normal                                                             */
/* ------------------------------------------------------------------ */

/*
 * dist_norm_cdf: Phi(x) = erfc(-x / sqrt 2) / 2 for any x; NAN for NAN.
 * The product -x/sqrt(2) is rounded, which alone would cost a relative error
 * of about x^2 eps in the tail (~1e-13 at x = -37); its exact residual dz
 * (by fma, plus the error of the constant) is put back to first order:
 * erfc(z + dz) = erfc(z) - dz (2/sqrt pi) e^(-z^2). Result relative error is
 * then that of the C library's erfc (a few ulps, glibc) down to the
 * subnormal range (x < -37.5).
 */
double
dist_norm_cdf(double x)
{
	double z, dz;

	if (isnan(x))
		return NAN;
	if (isinf(x))
		return x > 0 ? 1 : 0;
	z = -x * M_SQRT1_2;
	dz = fma(-x, M_SQRT1_2, -z) + -x * SQRT1_2_LO;
	return 0.5 * erfc(z) - 0.5 * M_2_SQRTPI * dz * exp(-z * z);
}

/*
 * Wichura's algorithm AS 241 (PPND16), Applied Statistics 37 (1988) 477-484:
 * rational approximations in three ranges, relative accuracy about 1e-16.
 * Coefficients as printed in the paper. p in (0, 1).
 */
static double
as241(double p)
{
	static const double a[8] = {
		3.3871328727963666080e0, 1.3314166789178437745e2,
		1.9715909503065514427e3, 1.3731693765509461125e4,
		4.5921953931549871457e4, 6.7265770927008700853e4,
		3.3430575583588128105e4, 2.5090809287301226727e3 };
	static const double b[8] = {
		1.0, 4.2313330701600911252e1,
		6.8718700749205790830e2, 5.3941960214247511077e3,
		2.1213794301586595867e4, 3.9307895800092710610e4,
		2.8729085735721942674e4, 5.2264952788528545610e3 };
	static const double c[8] = {
		1.42343711074968357734e0, 4.63033784615654529590e0,
		5.76949722146069140550e0, 3.64784832476320460504e0,
		1.27045825245236838258e0, 2.41780725177450611770e-1,
		2.27238449892691845833e-2, 7.74545014278341407640e-4 };
	static const double d[8] = {
		1.0, 2.05319162663775882187e0,
		1.67638483018380384940e0, 6.89767334985100004550e-1,
		1.48103976427480074590e-1, 1.51986665636164571966e-2,
		5.47593808499534494600e-4, 1.05075007164441684324e-9 };
	static const double e[8] = {
		6.65790464350110377720e0, 5.46378491116411436990e0,
		1.78482653991729133580e0, 2.96560571828504891230e-1,
		2.65321895265761230930e-2, 1.24266094738807843860e-3,
		2.71155556874348757815e-5, 2.01033439929228813265e-7 };
	static const double f[8] = {
		1.0, 5.99832206555887937690e-1,
		1.36929880922735805310e-1, 1.48753612908506148525e-2,
		7.86869131145613259100e-4, 1.84631831751005468180e-5,
		1.42151175831644588870e-7, 2.04426310338993978564e-15 };
	const double *num, *den;
	double q = p - 0.5, r, pn, pd, x;
	int i;

	if (fabs(q) <= 0.425) {
		r = 0.180625 - q * q;
		num = a;
		den = b;
	} else {
		r = sqrt(-log(q < 0 ? p : 1 - p));
		if (r <= 5) {
			r -= 1.6;
			num = c;
			den = d;
		} else {
			r -= 5;
			num = e;
			den = f;
		}
	}
	pn = num[7];
	pd = den[7];
	for (i = 6; i >= 0; i--) {
		pn = pn * r + num[i];
		pd = pd * r + den[i];
	}
	x = pn / pd;
	if (fabs(q) <= 0.425)
		return q * x;
	return q < 0 ? -x : x;
}

/* Lower-half quantile, p in (0, 0.5]: AS 241 and one Halley step. */
static double
norm_lower(double p)
{
	double x = as241(p), e, u;

	/* exp(x^2/2) overflows past |x| = 37.6; AS 241 alone is used there. */
	if (x > -37.5) {
		e = dist_norm_cdf(x) - p;
		u = e * SQRT_2PI * exp(0.5 * x * x);
		x -= u / (1 + 0.5 * x * u);
	}
	return x;
}

/*
 * dist_norm_quantile: x with Phi(x) = p, for p in (0, 1); NAN otherwise
 * (including p = 0, 1, NAN). AS 241 followed by one Halley step against
 * dist_norm_cdf, always on the lower tail: for p > 1/2 the result is
 * -quantile(1 - p), 1 - p being exact there. Measured relative error below
 * 3.5e-16 against mpmath (p from 1e-300 to 1 - 1e-6).
 */
double
dist_norm_quantile(double p)
{
	if (!(p > 0 && p < 1))
		return NAN;
	if (p > 0.5)
		return -norm_lower(1 - p);
	return norm_lower(p);
}

/* ------------------------------------------------------------------ */
/* Student t                                                          */
/* ------------------------------------------------------------------ */

/*
 * Two-sided tail Q2 = P(|T| > |t|) = I_x(nu/2, 1/2) with x = nu/(nu + t^2),
 * the central probability C = P(|T| < |t|) = 1 - Q2 (Abramowitz & Stegun
 * 26.7.1 and 26.5.27), and K = x^a y^b / B(a, b), from which
 * d ln Q2 / d ln t = -2K/Q2. x, y and their logarithms are formed from
 * r = t^2/nu or nu/t^2, whichever is <= 1, so nothing overflows.
 */
static void
t_tails(double t, double nu, double *Q2, double *C, double *K)
{
	double at = fabs(t), r, x, y, lx, ly;

	if (at * at < nu) {
		r = at * at / nu;
		x = 1 / (1 + r);
		y = r / (1 + r);
		lx = -log1p(r);
		ly = y > DBL_MIN ? log(y) : 2 * log(at) - log(nu) - log1p(r);
	} else {
		r = nu / at / at;
		x = r / (1 + r);
		y = 1 / (1 + r);
		ly = -log1p(r);
		lx = x > DBL_MIN ? log(x) : log(nu) - 2 * log(at) - log1p(r);
	}
	inc_beta(0.5 * nu, 0.5, x, y, lx, ly, Q2, C, K);
}

/*
 * dist_t_cdf: P(T <= t) for Student's t with real nu > 0 degrees of freedom;
 * nu = +inf gives the normal CDF. NAN if t or nu is NAN or nu <= 0.
 * Relative error against mpmath: below 5e-15 for |t| <= 10 and about
 * (1 + t^2) eps in the far tails (5e-14 at t = -25 and -40), which is the
 * tail's own sensitivity to a one-ulp change in t; measured for nu from 0.1
 * to 1e9. Large nu uses the asymptotic form of beta_temme, so there is no
 * loss as nu grows.
 */
double
dist_t_cdf(double t, double nu)
{
	double Q2, C, K;

	if (isnan(t) || !(nu > 0))
		return NAN;
	if (isinf(nu))
		return dist_norm_cdf(t);
	if (t == 0)
		return 0.5;
	if (isinf(t))
		return t > 0 ? 1 : 0;
	t_tails(t, nu, &Q2, &C, &K);
	return t < 0 ? 0.5 * Q2 : 0.5 + 0.5 * C;
}

struct troot {
	double	nu;
	double	lt;	/* ln of the target probability */
	int	central;	/* 1: target is C, 0: target is Q2 */
};

/* h(t) for solve_pos: ln C - ln target, or ln target - ln Q2. */
static double
t_root_eval(double t, const void *ctx, double *dh)
{
	const struct troot *tr = ctx;
	double Q2, C, K;

	t_tails(t, tr->nu, &Q2, &C, &K);
	if (tr->central) {
		*dh = 2 * K / C;
		return log(C) - tr->lt;
	}
	*dh = 2 * K / Q2;
	return tr->lt - log(Q2);
}

/*
 * dist_t_quantile: t with dist_t_cdf(t, nu) = p, for p in (0, 1) and real
 * nu > 0 (nu = +inf gives the normal quantile); NAN otherwise.
 * With q = min(p, 1 - p) (both exact), the positive root of P(T > t) = q is
 * found by solve_pos on ln Q2 = ln 2q when q < 1/4, else on
 * ln C = ln(1 - 2q), so that the probability on which Newton works is never
 * formed by cancellation. Start: exact for nu = 1, 2; otherwise the smaller
 * of the Cornish-Fisher expansion (Abramowitz & Stegun 26.7.5, recalled
 * from memory, used only as a starting value) and the tail bound
 * t <= (c_nu / q)^(1/nu), which holds because P(T > t) <= c_nu t^-nu with
 * c_nu = Gamma((nu+1)/2) nu^(nu/2-1) / (sqrt(pi) Gamma(nu/2)); a bound
 * above both 1e150 and e^20 (nu + 1) is returned as it is (it is then the
 * quantile to working precision, or inf on overflow).
 */
double
dist_t_quantile(double p, double nu)
{
	struct troot tr;
	double q, z, z2, t0, tc, lc, ltc;
	int sg;

	if (!(p > 0 && p < 1) || !(nu > 0))
		return NAN;
	if (isinf(nu))
		return dist_norm_quantile(p);
	if (p == 0.5)
		return 0;
	q = p < 0.5 ? p : 1 - p;
	if (nu == 1) {
		t0 = 1 / tan(M_PI * q);
		if (isinf(t0))
			return p < 0.5 ? -t0 : t0;
	} else if (nu == 2) {
		t0 = (1 - 2 * q) / sqrt(2 * q * (1 - q));
	} else {
		z = -dist_norm_quantile(q);
		z2 = z * z;
		t0 = z + z * (z2 + 1) / (4 * nu) +
		    z * ((5 * z2 + 16) * z2 + 3) / (96 * nu * nu) +
		    z * (((3 * z2 + 19) * z2 + 17) * z2 - 15) /
		    (384 * nu * nu * nu) +
		    z * ((((79 * z2 + 776) * z2 + 1482) * z2 - 1920) * z2 -
		    945) / (92160 * nu * nu * nu * nu);
		lc = lgamma_r(0.5 * (nu + 1), &sg) - lgamma_r(0.5 * nu, &sg) +
		    (0.5 * nu - 1) * log(nu) - 0.5 * log(M_PI);
		ltc = (lc - log(q)) / nu;
		/*
		 * Far out the bound is the quantile: P(T > t) = c_nu t^-nu
		 * (1 + O(nu (nu + 1) / t^2)), so once t > 1e150 and
		 * t > e^20 (nu + 1) it is exact to working precision. It may
		 * overflow to inf, which is then the correctly rounded answer.
		 */
		if (ltc > 345 && ltc > log1p(nu) + 20)
			return p < 0.5 ? -exp(ltc) : exp(ltc);
		tc = exp(ltc);
		if (!(t0 > 0 && t0 < tc))
			t0 = tc;
		if (!(t0 > 0 && t0 < INFINITY))
			t0 = 1;
	}
	tr.nu = nu;
	tr.central = q >= 0.25;
	tr.lt = tr.central ? log(1 - 2 * q) : log(2 * q);
	t0 = solve_pos(t_root_eval, &tr, t0);
	return p < 0.5 ? -t0 : t0;
}

/* ------------------------------------------------------------------ */
/* Chi-square                                                         */
/* ------------------------------------------------------------------ */

/*
 * dist_chi2_cdf: P(X <= x) for chi-square with real k > 0 degrees of freedom,
 * P(k/2, x/2) (Abramowitz & Stegun 26.4.19). 0 for x <= 0, 1 for x = +inf;
 * NAN if x or k is NAN, k <= 0 or k infinite. Relative error a few ulps for
 * the lower tail; the upper tail 1 - P is accurate in absolute terms.
 */
double
dist_chi2_cdf(double x, double k)
{
	double P, Q, f;

	if (isnan(x) || !(k > 0) || isinf(k))
		return NAN;
	inc_gamma(0.5 * k, 0.5 * x, &P, &Q, &f);
	return P;
}

struct c2root {
	double	a;	/* k / 2 */
	double	lt;	/* ln of the target probability */
	int	upper;	/* 1: target is Q, 0: target is P */
};

/* h(x) for solve_pos: ln P - ln target, or ln target - ln Q. */
static double
chi2_root_eval(double x, const void *ctx, double *dh)
{
	const struct c2root *cr = ctx;
	double P, Q, f;

	inc_gamma(cr->a, 0.5 * x, &P, &Q, &f);
	if (cr->upper) {
		*dh = f / Q;
		return cr->lt - log(Q);
	}
	*dh = f / P;
	return log(P) - cr->lt;
}

/*
 * dist_chi2_quantile: x with dist_chi2_cdf(x, k) = p, for p in (0, 1) and
 * finite real k > 0; NAN otherwise. Newton in ln x (solve_pos) on ln P = ln p
 * for p <= 1/2, on ln Q = ln(1 - p) above (1 - p exact there). Start: the
 * Wilson-Hilferty approximation (Abramowitz & Stegun 26.4.17), raised to the
 * lower bound 2 (p Gamma(a+1))^(1/a), a = k/2, which holds because
 * P(a, u) <= u^a / Gamma(a+1); a bound below 1e-300 is returned as it is
 * (it is then the quantile to full precision, or 0 on underflow).
 */
double
dist_chi2_quantile(double p, double k)
{
	struct c2root cr;
	double z, c, x0, xl, lxl;
	int sg;

	if (!(p > 0 && p < 1) || !(k > 0) || isinf(k))
		return NAN;
	cr.a = 0.5 * k;
	z = dist_norm_quantile(p);
	c = 2 / (9 * k);
	x0 = 1 - c + z * sqrt(c);
	x0 = x0 > 0 ? k * x0 * x0 * x0 : 0;
	lxl = M_LN2 + (log(p) + lgamma_r(cr.a + 1, &sg)) / cr.a;
	/*
	 * Below 1e-300 the bound is the quantile: P(a, u) = u^a / Gamma(a+1)
	 * (1 - O(u)). This also returns 0 (or a subnormal) where the quantile
	 * underflows, instead of iterating towards it.
	 */
	if (lxl < -690)
		return exp(lxl);
	xl = exp(lxl);
	if (!(x0 > xl))
		x0 = xl;
	if (!(x0 > 0 && x0 < INFINITY))
		x0 = k;
	cr.upper = p > 0.5;
	cr.lt = cr.upper ? log(1 - p) : log(p);
	return solve_pos(chi2_root_eval, &cr, x0);
}

/* ------------------------------------------------------------------ */
/* CUSUM average run length                                           */
/* ------------------------------------------------------------------ */

/*
 * n-point Gauss-Legendre rule on [-1, 1]: Newton on P_n from the usual
 * cosine starting values, P_n by the three-term recurrence, weights
 * 2 / ((1 - x^2) P_n'(x)^2) (Abramowitz & Stegun 25.4.29).
 */
static void
gauss_legendre(int n, double *x, double *w)
{
	double z, p0, p1, p2, dp, dz;
	int i, j, it;

	for (i = 0; i < (n + 1) / 2; i++) {
		z = cos(M_PI * (i + 0.75) / (n + 0.5));
		for (it = 0; it < 100; it++) {
			p0 = 1;
			p1 = z;
			for (j = 2; j <= n; j++) {
				p2 = ((2 * j - 1) * z * p1 - (j - 1) * p0) / j;
				p0 = p1;
				p1 = p2;
			}
			dp = n * (z * p1 - p0) / (z * z - 1);
			dz = p1 / dp;
			z -= dz;
			if (fabs(dz) <= 1e-15)
				break;
		}
		p0 = 1;
		p1 = z;
		for (j = 2; j <= n; j++) {
			p2 = ((2 * j - 1) * z * p1 - (j - 1) * p0) / j;
			p0 = p1;
			p1 = p2;
		}
		dp = n * (z * p1 - p0) / (z * z - 1);
		x[i] = -z;
		x[n - 1 - i] = z;
		w[i] = w[n - 1 - i] = 2 / ((1 - z * z) * dp * dp);
	}
}

/* Standard normal density. */
static double
norm_pdf(double x)
{
	return exp(-0.5 * x * x) / SQRT_2PI;
}

/*
 * ARL of the upper CUSUM S_n = max(0, S_(n-1) + X_n - k), S_0 = 0, alarm at
 * S_n > h, X_n ~ N(mu, 1). L(s), the ARL from S = s, solves the integral
 * equation (Page 1954, Biometrika 41; Brook & Evans 1972, Biometrika 59)
 *   L(s) = 1 + L(0) Phi(k - s - mu) + int_0^h L(y) phi(y + k - s - mu) dy,
 * the middle term being the atom at 0. Nystrom method: with the
 * Gauss-Legendre nodes y_j and weights w_j on [0, h] and s_0 = 0, the
 * unknowns L(s_0), L(y_1..y_n) satisfy the (n+1) x (n+1) linear system
 *   L_i - L_0 Phi(k - s_i - mu) - sum_j w_j phi(y_j + k - s_i - mu) L_j = 1,
 * solved by LAPACK dgesv; the ARL is L_0. The kernel is a unit-width
 * Gaussian, so n = 20 + 2h nodes (measured: relative change < 1e-10 against
 * 400 nodes for h up to 50) give far more than 7 digits; the stack holds the
 * system (82 KB) for h <= DIST_CUSUM_HMAX. Conditioning: I - K is nearly
 * singular (its smallest singular value is ~ 1/ARL), so the rounding error
 * grows with the ARL: measured against a 30-digit solve about 1e-15 x ARL
 * relative (3.5e-10 at ARL 1e6, 1.3e-6 at 1e9). Returns 0 or E_NUMERIC.
 */
static int
cusum_arl1(double k, double h, double mu, double *arl)
{
	double xi[CUSUM_NMAX], wi[CUSUM_NMAX], s[CUSUM_NMAX + 1];
	double A[(CUSUM_NMAX + 1) * (CUSUM_NMAX + 1)], b[CUSUM_NMAX + 1];
	lapack_int ipiv[CUSUM_NMAX + 1], m, info;
	int n, i, j;

	n = (int)ceil(20 + 2 * h);
	if (n > CUSUM_NMAX)
		n = CUSUM_NMAX;
	m = n + 1;
	gauss_legendre(n, xi, wi);
	s[0] = 0;
	for (j = 0; j < n; j++) {
		s[j + 1] = 0.5 * h * (1 + xi[j]);
		wi[j] *= 0.5 * h;
	}
	for (i = 0; i <= n; i++) {
		A[i * m] = (i == 0) - dist_norm_cdf(k - s[i] - mu);
		for (j = 1; j <= n; j++)
			A[i * m + j] = (i == j) -
			    wi[j - 1] * norm_pdf(s[j] + k - s[i] - mu);
		b[i] = 1;
	}
	info = LAPACKE_dgesv(LAPACK_ROW_MAJOR, m, 1, A, m, ipiv, b, 1);
	if (info != 0)
		return E_NUMERIC;
	*arl = b[0];
	return 0;
}

/*
 * Two-sided ARL from the one-sided ones, 1/ARL = 1/ARL+ + 1/ARL- (the
 * customary relation, as in the project's numerics notes, section 7). It is
 * exact when the two statistics are never positive together; S- can only
 * become positive while S+ > 2k, so h <= 2k suffices. Otherwise it is an
 * approximation: the notes report a simulation at k = 0.5, h = 4,
 * delta = 0 (20,000 runs) of 167.1 +- 1.1 against 167.68 from this
 * relation. A side whose computed ARL is not in [1, CUSUM_ARL_BIG] is
 * taken as infinite: there the linear system has lost most of its digits
 * and the side contributes less than 1/CUSUM_ARL_BIG anyway. Both sides
 * so: E_NUMERIC.
 */
static int
cusum_combine(double up, double dn, double *arl)
{
	int bu = !(up >= 1 && up <= CUSUM_ARL_BIG);
	int bd = !(dn >= 1 && dn <= CUSUM_ARL_BIG);

	if (bu && bd)
		return E_NUMERIC;
	if (bu)
		*arl = dn;
	else if (bd)
		*arl = up;
	else
		*arl = 1 / (1 / up + 1 / dn);
	return 0;
}

/*
 * dist_cusum_arl: average run length of the two-sided CUSUM
 * S+ = max(0, S+ + z - k), S- = max(0, S- - z - k), both from 0, alarm when
 * either exceeds h, for z ~ N(delta, 1) (Page 1954). Inputs: k >= 0 finite,
 * 0 < h <= DIST_CUSUM_HMAX, delta finite, arl non-NULL; otherwise E_ARG.
 * The lower side is the upper one for -z, so ARL- (delta) = ARL+ (-delta),
 * each by cusum_arl1; combined by cusum_combine. On success *arl is set and
 * 0 returned; E_NUMERIC (and *arl untouched) if LAPACK reports a singular
 * system or both sides exceed 1e12. Accuracy: relative error about
 * 1e-15 x ARL from rounding (so 7 significant digits up to ARL ~ 1e8) plus
 * < 1e-10 from the quadrature.
 */
int
dist_cusum_arl(double k, double h, double delta, double *arl)
{
	double up, dn;
	int rc;

	if (arl == NULL || !(k >= 0) || isinf(k) || !(h > 0) ||
	    !(h <= DIST_CUSUM_HMAX) || !isfinite(delta))
		return E_ARG;
	if ((rc = cusum_arl1(k, h, delta, &up)) != 0)
		return rc;
	if (delta == 0)
		dn = up;
	else if ((rc = cusum_arl1(k, h, -delta, &dn)) != 0)
		return rc;
	return cusum_combine(up, dn, arl);
}

/* ln ARL0(h) - ln arl0; +inf when the ARL is beyond what can be computed. */
static int
h_gap(double k, double h, double larl0, double *g)
{
	double arl;
	int rc;

	rc = dist_cusum_arl(k, h, 0, &arl);
	if (rc == E_NUMERIC) {
		*g = INFINITY;
		return 0;
	}
	if (rc != 0)
		return rc;
	*g = log(arl) - larl0;
	return 0;
}

/*
 * dist_cusum_h_for_arl: the decision interval h for which the two-sided
 * CUSUM with reference value k has in-control (delta = 0) ARL equal to arl0.
 * Inputs: k >= 0 finite, arl0 finite with 1/(2 Phi(-k)) < arl0 <=
 * DIST_CUSUM_ARL0_MAX (the lower end is the ARL as h -> 0+), and the root
 * must lie in (0, DIST_CUSUM_HMAX]; h non-NULL. Otherwise E_ARG, *h
 * untouched. ln ARL0(h) is increasing and close to linear in h, so the root
 * is bracketed by doubling from h = 1 and refined by the Illinois variant of
 * regula falsi (Dowell & Jarratt 1971, BIT 11) on ln ARL0 until the bracket
 * is below 1e-10 or |ln ARL0 - ln arl0| <= 1e-14; the result is then
 * limited by the ARL accuracy (1e-15 x arl0 relative, i.e. dh ~ 1e-9 at
 * arl0 = 1e6 and ~ 1e-5 at 1e10 for k = 0.5). E_NUMERIC if an ARL
 * evaluation fails.
 */
int
dist_cusum_h_for_arl(double k, double arl0, double *h)
{
	double larl0, lo, hi, glo, ghi, x, gx;
	int rc, it, side = 0;

	if (h == NULL || !(k >= 0) || isinf(k) || !(arl0 > 1) ||
	    !(arl0 <= DIST_CUSUM_ARL0_MAX))
		return E_ARG;
	larl0 = log(arl0);
	lo = 0;
	glo = -log(2 * dist_norm_cdf(-k)) - larl0;
	if (!(glo < 0))
		return E_ARG;
	hi = 1;
	for (;;) {
		if ((rc = h_gap(k, hi, larl0, &ghi)) != 0)
			return rc;
		if (ghi >= 0)
			break;
		if (hi >= DIST_CUSUM_HMAX)
			return E_ARG;
		lo = hi;
		glo = ghi;
		hi = fmin(2 * hi, DIST_CUSUM_HMAX);
	}
	for (it = 0; it < 200 && hi - lo > 1e-10; it++) {
		if (isinf(ghi))
			x = 0.5 * (lo + hi);
		else
			x = hi - ghi * (hi - lo) / (ghi - glo);
		if (!(x > lo && x < hi))
			x = 0.5 * (lo + hi);
		if ((rc = h_gap(k, x, larl0, &gx)) != 0)
			return rc;
		if (fabs(gx) <= 1e-14) {
			lo = hi = x;
			break;
		}
		if (gx < 0) {
			lo = x;
			glo = gx;
			if (side == -1)
				ghi *= 0.5;
			side = -1;
		} else {
			hi = x;
			ghi = gx;
			if (side == 1)
				glo *= 0.5;
			side = 1;
		}
	}
	*h = 0.5 * (lo + hi);
	return 0;
}
