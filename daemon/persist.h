/* SPDX-License-Identifier: ISC */
/*
 * persist: the byte formats of the state directory, described byte by byte
 * in daemon/STATE.md: checkpoint header and trailer, model blocks (one
 * registry entry with its model, settings, detectors and history, bit for
 * bit), journal segment headers and journal entries, each framed with its
 * length and a CRC-32C. PURE: encodes into and decodes from caller buffers;
 * no I/O, no clocks, no logging. Files, fsync, and what to do with damage
 * are state.c's business.
 */
#ifndef COEFD_PERSIST_H
#define COEFD_PERSIST_H

#include <stddef.h>
#include <stdint.h>

#include "limits.h"
#include "registry.h"

/* Format version written by this build. Bump it (and describe the change in
 * STATE.md) whenever a byte of any layout below changes; readers refuse a
 * higher version with E_VERSION. */
#define PERSIST_VERSION		1

#define PERSIST_CKPT_HDR_LEN	48	/* checkpoint file header */
#define PERSIST_CKPT_END_LEN	20	/* checkpoint trailer */
#define PERSIST_BLOCK_HDR_LEN	12	/* model block: magic, len, crc */
#define PERSIST_JNL_HDR_LEN	40	/* journal segment header */
#define PERSIST_JENT_HDR_LEN	8	/* journal entry: len, crc */
/* Largest journal entry payload (a configuration text plus its framing). */
#define PERSIST_JENT_MAX	(CONF_FILE_MAX + 64)

/* Decoders: the buffer ends before the framed length (a torn or truncated
 * tail); the caller decides which. Positive, unlike the errors. */
#define PERSIST_SHORT		1

/* Journal segment header flag: the previous segment lost entries (a write
 * failure whose backlog was dropped), so this segment may only be replayed
 * on top of a checkpoint whose seq is this segment's seq. */
#define PERSIST_JNL_AFTER_GAP	0x1u

struct persist_ckpt_hdr {
	uint32_t	 version;
	uint32_t	 flags;		/* 0 in version 1 */
	uint64_t	 seq;		/* first journal segment not included */
	uint64_t	 nmodels;	/* model blocks that follow */
	double		 created;	/* Unix time (informative) */
};

struct persist_jnl_hdr {
	uint32_t	 version;
	uint32_t	 flags;		/* PERSIST_JNL_* */
	uint64_t	 seq;		/* segment number */
	double		 created;	/* Unix time (informative) */
};

enum persist_jtype {
	PERSIST_J_CONF = 1,	/* configuration in force from here on */
	PERSIST_J_RELOAD = 2,	/* configuration reloaded (SIGHUP/.reload) */
	PERSIST_J_RECORD = 3,	/* a record accepted by a model */
	PERSIST_J_PIN = 4,	/* .pin */
	PERSIST_J_FREEZE = 5,	/* .freeze / .thaw */
	PERSIST_J_RESET = 6	/* .reset */
};

/* One journal entry. Decoded names and texts point into the buffer (not
 * NUL-terminated); decoded values are copied to the caller's xbuf. */
struct persist_jentry {
	enum persist_jtype type;
	const char	*name;		/* model ops */
	size_t		 namelen;
	double		 t;		/* RECORD, PIN: record/command time */
	int		 nx;		/* RECORD: raw values, target last */
	const double	*x;
	int		 on;		/* FREEZE: 1 freeze, 0 thaw */
	const char	*text;		/* CONF, RELOAD */
	size_t		 textlen;
};

/* CRC-32C (Castagnoli, reflected polynomial 0x82F63B78), as in RFC 3720
 * B.4: start with crc = 0, feed buffers in order. */
uint32_t persist_crc32c(uint32_t crc, const void *buf, size_t len);
/* persist_crc32c_sw: the same, always by table (no CPU instruction). */
uint32_t persist_crc32c_sw(uint32_t crc, const void *buf, size_t len);

/* Checkpoint header and trailer. */
void	 persist_ckpt_hdr_encode(const struct persist_ckpt_hdr *h,
	    uint8_t *out);
int	 persist_ckpt_hdr_decode(const uint8_t *buf, size_t len,
	    struct persist_ckpt_hdr *h);
void	 persist_ckpt_end_encode(uint64_t nmodels, uint8_t *out);
int	 persist_ckpt_end_decode(const uint8_t *buf, size_t len,
	    uint64_t *nmodels);
/* persist_ckpt_is_end: 1 when buf starts with the trailer magic. */
int	 persist_ckpt_is_end(const uint8_t *buf, size_t len);

/* Model blocks. */

/* persist_model_size: bytes of e's block, framing included. */
int	 persist_model_size(const struct reg_entry *e, size_t *len);
/* persist_model_encode: e's block into out[0..cap); *len its size. */
int	 persist_model_encode(const struct reg_entry *e, uint8_t *out,
	    size_t cap, size_t *len);
/* persist_model_check: framing and CRC of the block at buf; its length. */
int	 persist_model_check(const uint8_t *buf, size_t len, size_t *blocklen);
/* persist_model_decode: a new entry (not in any registry) from a block. */
int	 persist_model_decode(const uint8_t *buf, size_t len,
	    struct reg_entry **out, char *errbuf, size_t errlen);
/* Compiled term lists shared by the models of one restore. */
struct persist_cache;
/* persist_cache_new: an empty cache; NULL when out of memory. */
struct persist_cache *persist_cache_new(void);
/* persist_cache_free: drop the cache (decoded models keep their terms). */
void	 persist_cache_free(struct persist_cache *c);
/* persist_model_decode_cached: the same, sharing term lists through c. */
int	 persist_model_decode_cached(const uint8_t *buf, size_t len,
	    struct persist_cache *c, struct reg_entry **out, char *errbuf,
	    size_t errlen);
/* persist_model_decode_checked: the same for a block persist_model_check
 * just passed (blocklen bytes): its CRC is not computed again. */
int	 persist_model_decode_checked(const uint8_t *buf, size_t blocklen,
	    struct persist_cache *c, struct reg_entry **out, char *errbuf,
	    size_t errlen);
/* persist_model_peek_name: the name a (maybe damaged) block starts with. */
int	 persist_model_peek_name(const uint8_t *buf, size_t len, char *name);
/* persist_resync: next offset >= from holding a valid block or trailer. */
size_t	 persist_resync(const uint8_t *buf, size_t len, size_t from);

/* Journal. */
void	 persist_jnl_hdr_encode(const struct persist_jnl_hdr *h,
	    uint8_t *out);
int	 persist_jnl_hdr_decode(const uint8_t *buf, size_t len,
	    struct persist_jnl_hdr *h);
/* persist_jentry_size: bytes of the framed entry; 0 if it cannot be one. */
size_t	 persist_jentry_size(const struct persist_jentry *je);
/* persist_jentry_encode: the framed entry into out[0..len). */
int	 persist_jentry_encode(const struct persist_jentry *je, uint8_t *out,
	    size_t len);
/* persist_jentry_decode: one framed entry; *used = its bytes. */
int	 persist_jentry_decode(const uint8_t *buf, size_t len, size_t *used,
	    struct persist_jentry *je, double *xbuf);

#endif
