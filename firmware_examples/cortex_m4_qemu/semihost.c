#include "semihost.h"

enum {
    SYS_OPEN = 0x01, SYS_CLOSE = 0x02, SYS_WRITE0 = 0x04, SYS_WRITE = 0x05,
    SYS_READ = 0x06, SYS_EXIT = 0x18, SYS_EXIT_EXTENDED = 0x20
};

/* r0 = operation, r1 = pointer to the argument block; the result comes back
 * in r0.  On M-profile cores the trap is the BKPT 0xAB instruction. */
static int32_t sh_call(int32_t op, const void *args)
{
    register int32_t r0 __asm__("r0") = op;
    register const void *r1 __asm__("r1") = args;
    __asm__ volatile("bkpt 0xAB" : "+r"(r0) : "r"(r1) : "memory");
    return r0;
}

static size_t length(const char *text)
{
    size_t n = 0;
    while (text[n] != '\0') {
        n++;
    }
    return n;
}

int32_t sh_open(const char *path, int32_t mode)
{
    const uint32_t args[3] = {(uint32_t)path, (uint32_t)mode, (uint32_t)length(path)};
    return sh_call(SYS_OPEN, args);
}

int32_t sh_read(int32_t handle, void *buf, size_t n)
{
    const uint32_t args[3] = {(uint32_t)handle, (uint32_t)buf, (uint32_t)n};
    return sh_call(SYS_READ, args);
}

int32_t sh_write(int32_t handle, const void *buf, size_t n)
{
    const uint32_t args[3] = {(uint32_t)handle, (uint32_t)buf, (uint32_t)n};
    return sh_call(SYS_WRITE, args);
}

int32_t sh_close(int32_t handle)
{
    const uint32_t args[1] = {(uint32_t)handle};
    return sh_call(SYS_CLOSE, args);
}

void sh_puts(const char *text)
{
    (void)sh_call(SYS_WRITE0, text);
}

void sh_exit(int status)
{
    /* ADP_Stopped_ApplicationExit with the status: qemu exits with it. */
    const uint32_t args[2] = {0x20026u, (uint32_t)status};
    (void)sh_call(SYS_EXIT_EXTENDED, args);
    for (;;) {
    }
}
