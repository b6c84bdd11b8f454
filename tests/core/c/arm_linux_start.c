/*
 * arm_linux_start.c - start-up for running the Cortex-M builds of
 * fixed_vectors.c under qemu-arm (user mode), without a C library.
 *
 * The program is compiled for the real target (-mcpu=cortex-m0plus or
 * cortex-m4, Thumb, soft float, libgcc's integer helpers), and qemu
 * executes those very instructions; only the output goes through a Linux
 * EABI system call (write = 4, exit = 1, number in r7, svc #0).
 */
#include <stddef.h>

int main(void);
void pfx_test_write(const char *s, unsigned n);
void _start(void);
void *memcpy(void *dst, const void *src, size_t n);
void *memset(void *dst, int c, size_t n);
void *memmove(void *dst, const void *src, size_t n);
int memcmp(const void *a, const void *b, size_t n);

/* r7 carries the system call number; Thumb code uses r7 as the frame
 * pointer unless it is omitted (as it is not at -O0). */
__attribute__((optimize("omit-frame-pointer"))) static long pfx_syscall3(long number, long a, long b, long c)
{
    register long r7 __asm__("r7") = number;
    register long r0 __asm__("r0") = a;
    register long r1 __asm__("r1") = b;
    register long r2 __asm__("r2") = c;
    __asm__ volatile("svc #0" : "+r"(r0) : "r"(r7), "r"(r1), "r"(r2) : "memory");
    return r0;
}

void pfx_test_write(const char *s, unsigned n)
{
    (void)pfx_syscall3(4, 1, (long)s, (long)n);
}

void _start(void)
{
    int rc = main();
    (void)pfx_syscall3(1, rc, 0, 0);
    for (;;) {
    }
}

/* <string.h> functions the core may use (and the compiler may call for
 * array copies and clears); no C library is linked. */
void *memcpy(void *dst, const void *src, size_t n)
{
    unsigned char *d = dst;
    const unsigned char *s = src;
    while (n-- > 0u) {
        *d++ = *s++;
    }
    return dst;
}

void *memset(void *dst, int c, size_t n)
{
    unsigned char *d = dst;
    while (n-- > 0u) {
        *d++ = (unsigned char)c;
    }
    return dst;
}

void *memmove(void *dst, const void *src, size_t n)
{
    unsigned char *d = dst;
    const unsigned char *s = src;
    if (d < s) {
        while (n-- > 0u) {
            *d++ = *s++;
        }
    } else {
        while (n-- > 0u) {
            d[n] = s[n];
        }
    }
    return dst;
}

int memcmp(const void *a, const void *b, size_t n)
{
    const unsigned char *x = a;
    const unsigned char *y = b;
    for (; n > 0u; --n, ++x, ++y) {
        if (*x != *y) {
            return (*x < *y) ? -1 : 1;
        }
    }
    return 0;
}
