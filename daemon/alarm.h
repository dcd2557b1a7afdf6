/* SPDX-License-Identifier: ISC */
/*
 * alarm: drift detectors with hysteresis. PURE: they return states and
 * events and never log or keep time themselves (time comes in with each
 * record). No allocation.
 */
#ifndef COEFD_ALARM_H
#define COEFD_ALARM_H

#include <stdint.h>

enum alarm_det {
	ALARM_CUSUM = 0,	/* two-sided CUSUM on standardised errors */
	ALARM_R2 = 1,		/* one-step-ahead R^2 below a floor */
	ALARM_DRIFT = 2,	/* coefficients moved from the pinned reference */
	ALARM_SHIFT = 3,	/* gated records persisted: a level shift */
	ALARM_NDET = 4
};

/* Event bits returned by alarm_step / alarm_gate. */
#define ALARM_EV_ON(d)	(1u << (d))
#define ALARM_EV_OFF(d)	(1u << (8 + (d)))

/* Outcome of the outlier gate for one record. */
enum alarm_gate {
	ALARM_GATE_PASS = 0,	/* use the record */
	ALARM_GATE_OUTLIER = 1,	/* do not use it; count it */
	ALARM_GATE_SHIFT = 2	/* run of outliers: use it, shift alarm on */
};

struct alarm_opts {
	double	 cusum_k;	/* reference value, sigma units (0.5 common) */
	double	 cusum_h;	/* decision interval (INFINITY = off) */
	uint32_t dwell;		/* calm records needed to clear an alarm */
	double	 r2_floor;	/* one-step-ahead R^2 floor (NAN = off) */
	double	 r2_hyst;	/* clears above floor + hyst */
	double	 r2_min_neff;	/* R^2 alarm needs this effective count */
	double	 gate_z;	/* gate |z| > gate_z (INFINITY = off) */
	uint32_t gate_run;	/* consecutive gated records = level shift */
	double	 drift_q;	/* joint drift threshold on D^2 (INF = off) */
	double	 drift_clear;	/* clears below drift_clear * drift_q */
	uint32_t warmup;	/* one-step-ahead errors before arming */
};

struct alarm_state {
	int	 on;		/* 1 = alarm */
	double	 t_changed;	/* record time of the last change (NAN=never) */
	double	 value;		/* the detector's statistic, last record */
};

/* Public so persistence can save and restore it bit for bit. */
struct alarm {
	double		 cusum_pos, cusum_neg;	/* S+ and S- */
	uint32_t	 calm[ALARM_NDET];	/* dwell counters */
	uint32_t	 gate_consec;		/* consecutive gated records */
	uint64_t	 n_seen;		/* records with a defined z */
	uint64_t	 n_gated;		/* records gated as outliers */
	uint64_t	 n_shifts;		/* level shifts declared */
	struct alarm_state st[ALARM_NDET];
};

/* Per-record input to alarm_step. NAN marks an undefined input. */
struct alarm_input {
	double	 t;		/* record time, seconds */
	double	 z;		/* standardised one-step-ahead error */
	double	 r2_pred;	/* one-step-ahead R^2 */
	double	 n_eff;		/* effective sample count */
	double	 drift_d2;	/* joint drift statistic (NAN: no reference) */
	int	 coef_out;	/* 1 if a per-coefficient tolerance is broken */
};

/* alarm_opts_default: the documented defaults (common practice values). */
void		 alarm_opts_default(struct alarm_opts *o);
/* alarm_opts_check: E_ARG with a message for an invalid setting. */
int		 alarm_opts_check(const struct alarm_opts *o, char *errbuf,
		    size_t errlen);
/* alarm_init: all detectors ok, statistics zero. */
void		 alarm_init(struct alarm *a);
/* alarm_armed: 1 once warm-up is over. */
int		 alarm_armed(const struct alarm *a, const struct alarm_opts *o);
/* alarm_gate: outlier gate for z; may raise the shift alarm. */
enum alarm_gate	 alarm_gate(struct alarm *a, const struct alarm_opts *o,
		    double z, double t, unsigned *events);
/* alarm_step: feed one record's statistics to every detector. */
unsigned	 alarm_step(struct alarm *a, const struct alarm_opts *o,
		    const struct alarm_input *in);
/* alarm_any: 1 if any detector is in alarm. */
int		 alarm_any(const struct alarm *a);
/* alarm_name: stable short name of a detector ("cusum", ...). */
const char	*alarm_name(enum alarm_det d);
/* alarm_cusum_restart: restart CUSUM with a head start (after a reset). */
void		 alarm_cusum_restart(struct alarm *a, double head);

#endif
