/*
 * pfx_port_string.c - the three <string.h> functions the core calls on the
 * target build (struct copies and clears that the compiler turns into calls).
 *
 * The target build links no C library (-nostdlib, libgcc only), so that the
 * flash and stack figures of the budget cover every byte that runs.  These
 * are plain, portable versions: a word loop when the pointers are
 * word-aligned (all the core's structs are), a byte loop otherwise.  A
 * vendor or newlib memcpy may be faster; the budget then errs on the slow
 * side.
 *
 * Built with -fno-builtin -fno-tree-loop-distribute-patterns (see
 * python/peerfix/budget/build.py): without them gcc would recognise the
 * loops below and compile them into calls to themselves.
 */
#include <stddef.h>
#include <stdint.h>

void *memcpy(void *restrict dst, const void *restrict src, size_t n);
void *memmove(void *dst, const void *src, size_t n);
void *memset(void *dst, int c, size_t n);

static int both_aligned(const void *a, const void *b)
{
    return (((uintptr_t)a | (uintptr_t)b) & 3u) == 0u;
}

/* Forward copy; also right for an overlap with dst below src (memmove). */
static void copy_forward(unsigned char *d, const unsigned char *s, size_t n)
{
    if (both_aligned(d, s)) {
        uint32_t *dw = (uint32_t *)(void *)d;
        const uint32_t *sw = (const uint32_t *)(const void *)s;
        for (; n >= 4u; n -= 4u) {
            *dw++ = *sw++;
        }
        d = (unsigned char *)dw;
        s = (const unsigned char *)sw;
    }
    while (n-- > 0u) {
        *d++ = *s++;
    }
}

void *memcpy(void *restrict dst, const void *restrict src, size_t n)
{
    copy_forward(dst, src, n);
    return dst;
}

void *memmove(void *dst, const void *src, size_t n)
{
    unsigned char *d = dst;
    const unsigned char *s = src;
    if ((uintptr_t)d <= (uintptr_t)s || (uintptr_t)d >= (uintptr_t)s + n) {
        copy_forward(d, s, n);
        return dst;
    }
    /* dst overlaps the tail of src: copy backwards */
    d += n;
    s += n;
    if (both_aligned(d, s)) {
        uint32_t *dw = (uint32_t *)(void *)d;
        const uint32_t *sw = (const uint32_t *)(const void *)s;
        for (; n >= 4u; n -= 4u) {
            *--dw = *--sw;
        }
        d = (unsigned char *)dw;
        s = (const unsigned char *)sw;
    }
    while (n-- > 0u) {
        *--d = *--s;
    }
    return dst;
}

void *memset(void *dst, int c, size_t n)
{
    unsigned char *d = dst;
    const unsigned char byte = (unsigned char)c;
    if (((uintptr_t)d & 3u) == 0u) {
        uint32_t *dw = (uint32_t *)(void *)d;
        const uint32_t word = 0x01010101u * byte;
        for (; n >= 4u; n -= 4u) {
            *dw++ = word;
        }
        d = (unsigned char *)dw;
    }
    while (n-- > 0u) {
        *d++ = byte;
    }
    return dst;
}
