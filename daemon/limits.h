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
#define TERMS_MAX		(RLS_MAX_P - 1)	/* terms, intercept excluded */

/* Protocol (daemon/proto.h, daemon/PROTOCOL.md). */
#define PROTO_MAX_VALUES	256	/* VALUES tokens on one line, target included */
#define PROTO_MAX_ARGS		4	/* raw argument tokens kept for a command */
#define PROTO_DETAIL_MAX	160	/* bytes of error detail, NUL included */
#define PROTO_LINE_DEFAULT	16384	/* default line cap, LF excluded */
#define PROTO_LINE_MAX		1048576	/* largest line cap proto_reader_new accepts */
#define PROTO_COUNT_MAX		1000000000u /* largest N in `.history` / `every=` */

/* JSON writer (daemon/json.h). */
#define JSON_MAX_DEPTH		32	/* nesting of objects and arrays */
#define DIST_CUSUM_HMAX		40.0	/* largest CUSUM decision interval h (sigma) */
#define DIST_CUSUM_ARL0_MAX	1e10	/* largest target in-control ARL for h search */

/* Configuration (daemon/conf.h). */
#define CONF_LINE_MAX		8192	/* bytes in one physical config line */
#define CONF_FILE_MAX		1048576	/* bytes in a config file */
#define CONF_PATH_MAX		1023	/* bytes in a configured path */
#define CONF_SOCKET_PATH_MAX	107	/* socket path: sun_path less its NUL */
#define CONF_HOST_MAX		45	/* an IPv6 literal (INET6_ADDRSTRLEN - 1) */
#define CONF_ADMIN_USERS_MAX	32	/* entries in admin_users */
#define CONF_USER_NAME_MAX	32	/* bytes in a user name (useradd's limit) */

/* Sockets passed by a service manager (daemon/activate.h). */
#define ACTIVATE_FDS_MAX	16	/* inherited sockets accepted */
#define ACTIVATE_NAME_MAX	255	/* bytes in one LISTEN_FDNAMES name */

#endif
