/*
 * Start-up for tests/data/driver_target.c on a QEMU Cortex-M machine (mps2-an385 /
 * mps2-an386: code from 0x0, RAM at 0x20000000): the vector table, .data copied and .bss
 * zeroed, then main(). Linked with tests/data/cortex.ld.
 */
#include <stdint.h>

extern uint32_t _sidata, _sdata, _edata, _sbss, _ebss, _estack;
int main(void);
void reset_handler(void);
void fault_handler(void);

__attribute__((section(".vectors"), used)) static void (*const vectors[16])(void) = {
    (void (*)(void))(&_estack), reset_handler, fault_handler, fault_handler, fault_handler,
    fault_handler, fault_handler, 0, 0, 0, 0, fault_handler, fault_handler, 0, fault_handler, fault_handler,
};

void reset_handler(void)
{
    uint32_t *src = &_sidata, *dst = &_sdata;
    while (dst < &_edata) {
        *dst++ = *src++;
    }
    for (dst = &_sbss; dst < &_ebss; dst++) {
        *dst = 0u;
    }
    (void)main();
    for (;;) {
    }
}

/* Any fault ends the run at once (semihosting SYS_EXIT, ADP_Stopped_RunTimeErrorUnknown):
 * the test sees no "end" line instead of a trace that grows until the time-out. */
void fault_handler(void)
{
    register uint32_t r0 __asm__("r0") = 0x18u;
    register uint32_t r1 __asm__("r1") = 0x20023u;
    __asm__ volatile("bkpt 0xab" : : "r"(r0), "r"(r1) : "memory");
    for (;;) {
    }
}
