/* Minimal ARM semihosting for a freestanding Cortex-M program under a debugger
 * or qemu-system-arm -semihosting.  Only what the harness needs: open, read,
 * write, close, exit.  Operation numbers are those of Arm's "Semihosting for
 * AArch32 and AArch64" specification (SYS_OPEN 0x01 ... SYS_EXIT 0x18). */
#ifndef SEMIHOST_H
#define SEMIHOST_H

#include <stddef.h>
#include <stdint.h>

enum { SH_MODE_READ_BINARY = 1, SH_MODE_WRITE_BINARY = 5 }; /* fopen "rb", "wb" */

int32_t sh_open(const char *path, int32_t mode);      /* handle, or -1 */
int32_t sh_read(int32_t handle, void *buf, size_t n);  /* bytes NOT read */
int32_t sh_write(int32_t handle, const void *buf, size_t n); /* bytes NOT written */
int32_t sh_close(int32_t handle);
void sh_puts(const char *text);                        /* to the host's stdout */
void sh_exit(int status) __attribute__((noreturn));

#endif
