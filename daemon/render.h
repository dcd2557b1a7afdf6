/* SPDX-License-Identifier: ISC */
/*
 * render: the one JSON shape of a model, shared by the daemon's replies and
 * `coefctl fit --json`, so scripts see the same keys everywhere. PURE:
 * writes into a struct json, no I/O.
 */
#ifndef COEFD_RENDER_H
#define COEFD_RENDER_H

#include "json.h"
#include "model.h"

struct render_model {
	const char		 *name;		/* model name */
	const char *const	 *features;	/* p coefficient names */
	const struct model	 *m;
	const struct model_report *rep;		/* in the user's units */
	const double		 *reference;	/* pinned ref, user's units */
	int			  epoch_times;	/* times are Unix seconds */
	const char *const	 *fields;	/* raw fields, or NULL: no keys */
	int			  nfields;
	const char		 *target;	/* target field name */
};

/* render_model: write the model object (keys listed in render.c). */
int	render_model(struct json *j, const struct render_model *r);
/* render_alarms: the "alarms" key with the names of active detectors. */
void	render_alarms(struct json *j, const struct model *m);
/* render_time: RFC 3339 UTC text of Unix time t ("" if not finite). */
int	render_time(double t, char *buf, size_t len);

#endif
