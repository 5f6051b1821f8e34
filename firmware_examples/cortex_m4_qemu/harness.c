/* Runs an affix-emitted estimator on a Cortex-M4 over vectors from the host.
 *
 * Reads vectors.bin (little-endian int32, N_IN per vector), evaluates each
 * with ESTIMATE(), writes outputs.bin (little-endian 32-bit words, N_OUT per
 * vector: the value of an integer output, the IEEE 754 bit pattern of a
 * float one) and exits with 0 on success.  Build it with the names of the
 * emitted estimator, for example:
 *
 *   make NAME=wrist_ft DIR=../../demo_out/firmware IN_T=int16_t OUT_T=int16_t N_IN=7 N_OUT=6
 *   make NAME=wrist_f DIR=... IN_T=int16_t OUT_T=float N_IN=7 N_OUT=6 FLOAT=1
 */
#include <stdint.h>

#include "semihost.h"

#define STR_(x) #x
#define STR(x) STR_(x)
#include STR(ESTIMATOR_HEADER)

#define BLOCK 64

#ifdef OUT_FLOAT
/* Reading a union member other than the last one stored reinterprets the
   bytes (C99 TC3, footnote 82): the float's bit pattern, exactly. */
static int32_t word(float v)
{
    union { float f; int32_t bits; } u;
    u.f = v;
    return u.bits;
}
#else
static int32_t word(OUT_T v)
{
    return (int32_t)v;
}
#endif

int main(void)
{
    static int32_t raw[BLOCK * N_IN];
    static int32_t result[BLOCK * N_OUT];
    int32_t in = sh_open("vectors.bin", SH_MODE_READ_BINARY);
    int32_t out = sh_open("outputs.bin", SH_MODE_WRITE_BINARY);
    if (in < 0 || out < 0) {
        sh_puts("harness: cannot open vectors.bin or outputs.bin\n");
        return 2;
    }
    for (;;) {
        int32_t missing = sh_read(in, raw, sizeof raw);
        uint32_t got = (uint32_t)(sizeof raw) - (uint32_t)missing;
        uint32_t count = got / (uint32_t)(sizeof raw[0] * N_IN);
        for (uint32_t k = 0; k < count; ++k) {
            IN_T y[N_IN];
            OUT_T x[N_OUT];
            for (uint32_t j = 0; j < N_IN; ++j) {
                y[j] = (IN_T)raw[k * N_IN + j]; /* the host sends values inside the box */
            }
            ESTIMATE(y, x);
            for (uint32_t i = 0; i < N_OUT; ++i) {
                result[k * N_OUT + i] = word(x[i]);
            }
        }
        if (count > 0 && sh_write(out, result, count * sizeof(int32_t) * N_OUT) != 0) {
            sh_puts("harness: short write to outputs.bin\n");
            return 3;
        }
        if (count < BLOCK) {
            break;
        }
    }
    (void)sh_close(in);
    (void)sh_close(out);
    sh_puts("harness: done\n");
    return 0;
}
