/* SPDX-License-Identifier: ISC */
/*
 * limits: every compile-time limit in one place. Runtime limits (set in the
 * config) are bounded by these.
 */
#ifndef COEFD_LIMITS_H
#define COEFD_LIMITS_H

#define RLS_MAX_P		256	/* coefficients per model (>= 64 required) */
#define MODEL_NAME_MAX		64	/* bytes in a model name, excluding NUL */
#define FIELD_NAME_MAX		32	/* bytes in a field (feature) name */
#define DIST_CUSUM_HMAX		40.0	/* largest CUSUM decision interval h (sigma) */
#define DIST_CUSUM_ARL0_MAX	1e10	/* largest target in-control ARL for h search */

#endif
