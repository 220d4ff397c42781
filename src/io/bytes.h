/* bytes.h: little-endian fields of our file and wire formats, read and
 * written through memcpy (any alignment, no aliasing games) with the
 * byte-order conversion of <endian.h> (no-ops on little-endian hosts).
 * For the codecs only (wire.c, capture.c, checkpoint.c): byte order is
 * converted nowhere else. */
#ifndef QW_BYTES_H
#define QW_BYTES_H

#include <endian.h>
#include <stdint.h>
#include <string.h>

static inline void qw_le_put16(unsigned char *d, uint16_t v)
{
	v = htole16(v);
	memcpy(d, &v, sizeof v);
}

static inline void qw_le_put32(unsigned char *d, uint32_t v)
{
	v = htole32(v);
	memcpy(d, &v, sizeof v);
}

static inline void qw_le_put64(unsigned char *d, uint64_t v)
{
	v = htole64(v);
	memcpy(d, &v, sizeof v);
}

static inline uint16_t qw_le_get16(const unsigned char *s)
{
	uint16_t v;

	memcpy(&v, s, sizeof v);
	return le16toh(v);
}

static inline uint32_t qw_le_get32(const unsigned char *s)
{
	uint32_t v;

	memcpy(&v, s, sizeof v);
	return le32toh(v);
}

static inline uint64_t qw_le_get64(const unsigned char *s)
{
	uint64_t v;

	memcpy(&v, s, sizeof v);
	return le64toh(v);
}

#endif
