/*
 * Reset and fault handlers of the C replay program on QEMU's mps2-an386 (Cortex-M4F): enable the
 * FPU, zero .bss, open the semihosting console, run main() and report its status to QEMU.
 */
#include <stdint.h>
#include <stdlib.h>

extern int main(void);
extern void initialise_monitor_handles(void);
extern uint32_t __bss_start__[], __bss_end__[], __stack_top[];

void reset_handler(void);
void fault_handler(void);
void _fini(void);

__attribute__((section(".vector_table"), used)) static void *const vectors[16] = {
    __stack_top,    reset_handler, fault_handler, fault_handler,
    fault_handler,  fault_handler, fault_handler, 0,
    0,              0,             0,             fault_handler,
    fault_handler,  0,             fault_handler, fault_handler,
};

void reset_handler(void) {
    /* CPACR: full access to CP10 and CP11, the FPU (the hard-float ABI uses its registers). */
    *(volatile uint32_t *)0xE000ED88u |= 0xFu << 20;
    __asm volatile("dsb\n isb");
    for (uint32_t *p = __bss_start__; p < __bss_end__; p++) *p = 0;
    initialise_monitor_handles();
    exit(main());
}

void fault_handler(void) { exit(71); }

/* exit() runs the finalisers; this image registers none. */
void _fini(void) {}
