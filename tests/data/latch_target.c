/*
 * A scripted run of the generated latching-coil driver (prefix "coil"), built for the
 * host with gcc, for an ATmega328P run under simavr and for Cortex-M cores under QEMU.
 * All print the same lines:
 *   e <tick> <kind> <value>   an event hook call
 *   w <tick> <mask>           the switches hook
 *   x <state>                 after each scenario step
 * and the worst cycle count of the tick handler (AVR: Timer1 at clk/1; elsewhere 0):
 *   c tick <cycles>
 * The scenario (scenario.h, written by the test) is a list of {op, argument} pairs: set,
 * reset and stop call the driver's commands, run <n> runs n ticks (tick numbers from 0),
 * supply <code> gives a supply-compensated driver its reading, current <code> a boosted
 * driver its current-sense reading.
 */
#include <stdint.h>
#include "coil_driver.h"
#include "scenario.h"
#define TARGET_LOG 8u
#include "target_io.h"

#define OP_SET 1u
#define OP_RESET 2u
#define OP_STOP 3u
#define OP_RUN 4u
#define OP_SUPPLY 5u
#define OP_CURRENT 6u

static uint32_t now_tick;

void coil_port_switches(uint8_t mask) { log_add('w', mask); }
void coil_port_event(uint8_t kind, int32_t value) { log_add('e', (int32_t)(kind * 256 + value)); }

static void drain(void)
{
    drain_log(now_tick, 0);
}

int main(void)
{
    uint16_t step, t0, dt, overhead, worst_tick = 0u;
    uint32_t n;
    start_clock();
    t0 = NOW();
    overhead = (uint16_t)(NOW() - t0);
    coil_init();
    drain();
    for (step = 0u; step < sizeof(scenario) / sizeof(scenario[0]); step++) {
        uint32_t op = scenario[step][0], arg = scenario[step][1];
        if (op == OP_SET) {
            coil_set();
        } else if (op == OP_RESET) {
            coil_reset();
        } else if (op == OP_STOP) {
            coil_stop();
        } else if (op == OP_CURRENT) {
#ifdef COIL_LATCH_BOOSTED
            coil_current((uint16_t)arg);  /* the current-sense reading (a 12-bit ADC's code) */
#endif
        } else if (op == OP_SUPPLY) {
#ifdef COIL_PULSE_COMPENSATED
            coil_supply((uint16_t)arg);   /* the supply-sense reading (a 12-bit ADC's code) */
#endif
        } else {
            for (n = 0u; n < arg; n++) {
                t0 = NOW();
                coil_tick();
                dt = (uint16_t)(NOW() - t0 - overhead);
                worst_tick = dt > worst_tick ? dt : worst_tick;
                drain();
                now_tick++;
            }
        }
        uart_put('x');
        put_field(coil_state());
        uart_put('\n');
    }
    put_text("c tick");
    put_field(worst_tick);
    uart_put('\n');
    put_text("end\n");
    stop();
    return 0;
}
