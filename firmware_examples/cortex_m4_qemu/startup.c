/* Reset entry for a Cortex-M4 under qemu (-M mps2-an386): the two-word vector
 * table (initial stack pointer, reset handler) is all the core needs to start.
 * qemu loads every ELF section where it belongs, so only .bss needs clearing. */
#include <stdint.h>

extern uint32_t __bss_start__, __bss_end__, __stack_top__;
int main(void);
void reset_handler(void) __attribute__((noreturn));

__attribute__((section(".vectors"), used))
static const void *const vector_table[2] = {&__stack_top__, (const void *)reset_handler};

void sh_exit(int status) __attribute__((noreturn));

void reset_handler(void)
{
#if defined(__ARM_FP)
    /* Grant full access to the FPU (coprocessors 10 and 11 in CPACR) before
       any floating-point instruction runs. */
    *(volatile uint32_t *)0xE000ED88u |= 0xFu << 20;
    __asm__ volatile("dsb\n\tisb" ::: "memory");
#endif
    for (uint32_t *p = &__bss_start__; p < &__bss_end__; ++p) {
        *p = 0u;
    }
    sh_exit(main());
}
