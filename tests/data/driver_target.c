/*
 * A scripted run of the generated reference driver (prefix "coil"), built for the host
 * with gcc and for an ATmega328P run under simavr. Both print the same lines:
 *   e <tick> <conversion> <kind> <value>   an event hook call
 *   s <tick> <conversion> <on>             the switch hook
 *   p <tick> <conversion> <counts>         the PWM compare hook
 *   b <tick> <conversion> <closed>         the bypass hook
 *   g <tick> <conversion> <masks>          a full bridge's hook: on-time mask + 16 x off-time mask
 *   k <tick> <conversion> <on>             a boosted peak's boost-switch hook
 *   f <tick> <conversion> <counts>         a mixed-decay hold's fast-end hook
 *   x <state> <fault>                      after each scenario step
 * and the worst cycle counts of the handlers (AVR: Timer1 at clk/1; host: 0):
 *   c <name> <cycles>
 * The scenario (scenario.h, written by the test) is a list of {op, argument} pairs. Each
 * tick runs CONVERSIONS_PER_TICK conversions (pwm_isr, then adc_isr) and then coil_tick().
 * A small integer coil model gives the current: it climbs toward FULL x compare / period
 * by a quarter of the way per conversion, at most SLEW codes (RISE_SLEW, a rise the
 * driver's shorted-turns check passes, until a "slew" step changes it), while the switch
 * is on (a full bridge: enabled with the drive mask on) and decays by a quarter per
 * conversion while it is off. The
 * hooks only log into RAM, so the timed calls hold no UART waits and no model arithmetic.
 * OP_LEVEL holds the current at a given code whatever the switch does (a closed-loop
 * hold's test feeds its samples so).
 */
#include <stdint.h>
#include "coil_driver.h"
#include "scenario.h"

#define OP_ON 1u
#define OP_OFF 2u
#define OP_CLEAR 3u
#define OP_RUN 4u
#define OP_SUPPLY 5u
#define OP_MODE 6u
#define OP_FULL 7u
#define OP_DIP 8u
#define OP_LEVEL 9u
#define OP_SLEW 10u
#define MODE_COIL 0u
#define MODE_OPEN 1u
#define MODE_SHORT 2u
#define MODE_LEVEL 3u
#define TARGET_LOG 16u
#ifdef COIL_DRIVER_DIP_CODES
#define DIP COIL_DRIVER_DIP_CODES
#else
#define DIP 0u
#endif

#include "target_io.h"

static uint16_t now_tick, now_conv;
static uint8_t sw, bypass;
static uint32_t compare;
static uint16_t current, supply, full, dip_at, level, slew = RISE_SLEW;
static uint8_t mode;

void coil_port_switch(uint8_t on) { sw = on; log_add('s', on); }
void coil_port_pwm_compare(coil_compare_t counts) { compare = counts; log_add('p', (int32_t)counts); }
void coil_port_bypass(uint8_t closed) { bypass = closed; log_add('b', closed); }
#ifdef COIL_BRIDGE_PEAK_SWITCHES
void coil_port_bridge(uint8_t on_time, uint8_t off_time) { log_add('g', (int32_t)(on_time + 16u * off_time)); }
#endif
#ifdef COIL_BOOST_PEAK
void coil_port_boost(uint8_t on) { log_add('k', on); }
#endif
#ifdef COIL_HOLD_FAST_Q16
void coil_port_fast_end(coil_compare_t counts) { log_add('f', (int32_t)counts); }
#endif
void coil_port_adc_start(void) { }
coil_adc_t coil_port_read_current(void) { return (coil_adc_t)current; }
coil_adc_t coil_port_read_supply(void) { return (coil_adc_t)supply; }
void coil_port_event(uint8_t kind, int32_t value) { log_add('e', (int32_t)(kind * 256 + value)); }
#if defined(COIL_HOLD_HYSTERETIC) || defined(COIL_HOLD_OFF_TIME)
static uint8_t win_armed, off_pending;
static uint16_t win_low, win_high;
void coil_port_threshold(uint8_t enable, coil_adc_t low, coil_adc_t high)
{
    win_armed = enable;
    win_low = low;
    win_high = high;
    log_add((uint8_t)(enable ? 'w' : 'u'), (int32_t)((uint32_t)low * 65536UL + (uint32_t)high));
}
#endif
#if defined(COIL_HOLD_OFF_TIME) || defined(COIL_HOLD_OFF_FAST_TICKS)   /* (mixed decay: a one-shot) */
#define coil_off_timer_isr_or_none() coil_off_timer_isr()
void coil_port_off_timer(uint16_t counts) { off_pending = 1u; log_add('o', (int32_t)counts); }
#else
#define coil_off_timer_isr_or_none() ((void)0)
#endif

#ifdef COIL_BRIDGE_PEAK_SWITCHES
/* A full bridge drives the coil while the outputs are enabled with the drive mask on (a
 * current-mode hold's off-times keep the outputs enabled and switch to the slow-decay
 * mask). Read from the hook log before it is printed, outside the timed calls. */
static uint8_t bridge_on;
#define DRIVING() (sw && bridge_on == COIL_BRIDGE_PEAK_SWITCHES)
static void track_bridge(void)
{
    uint8_t k;
    for (k = 0u; k < log_len; k++) {
        if (log_kind[k] == 'g') {
            bridge_on = (uint8_t)(log_value[k] & 0x0F);
        }
    }
}
#else
#define DRIVING() (sw)
#define track_bridge() ((void)0)
#endif

static void drain(void)
{
    track_bridge();
    drain_log(now_tick, &now_conv);
}

/* The coil: the current of the next conversion, from the switch as it is now. */
static void model(void)
{
    if (mode == MODE_LEVEL) {
        current = level;
    } else if (mode == MODE_OPEN) {
        current = 0u;
    } else if (mode == MODE_SHORT) {
        current = sw ? (uint16_t)COIL_ADC_MAX_CODE : 0u;
    } else if (DRIVING()) {
        uint16_t target = (uint16_t)((uint32_t)full * compare / COIL_TIMER_PERIOD_COUNTS);
        if (target >= current) {
            uint16_t step = (uint16_t)((target - current + 3u) / 4u);
            current = (uint16_t)(current + (step > slew ? slew : step));
        } else {
            current = (uint16_t)(current - (current - target) / 4u);
        }
    } else {
        current = (uint16_t)(current - (current + 3u) / 4u);
    }
}

static uint16_t worst_adc, worst_tick, worst_pwm, worst_threshold, overhead;

static void report(const char *name, uint16_t cycles)
{
    put_text("c ");
    put_text(name);
    put_field(cycles);
    uart_put('\n');
}

static uint16_t worst(uint16_t was, uint16_t t0)
{
    uint16_t dt = (uint16_t)(NOW() - t0 - overhead);
    return dt > was ? dt : was;
}

int main(void)
{
    uint16_t step, n, t0;
    start_clock();
    t0 = NOW();
    overhead = (uint16_t)(NOW() - t0);
    supply = COIL_SUPPLY_MIN_CODE;
    full = (uint16_t)COIL_ADC_PULL_IN_CODE;
    coil_init();
    drain();
    for (step = 0u; step < sizeof(scenario) / sizeof(scenario[0]); step++) {
        uint16_t op = scenario[step][0], arg = scenario[step][1];
        if (op == OP_ON) {
            coil_on();
        } else if (op == OP_OFF) {
            coil_off();
        } else if (op == OP_CLEAR) {
            coil_clear_fault();
        } else if (op == OP_SUPPLY) {
            supply = arg;
        } else if (op == OP_MODE) {
            mode = (uint8_t)arg;
        } else if (op == OP_FULL) {
            full = arg;
        } else if (op == OP_LEVEL) {
            mode = MODE_LEVEL;
            level = arg;
            current = arg;
        } else if (op == OP_SLEW) {
            slew = arg;
        } else if (op == OP_DIP) {
            dip_at = (uint16_t)(now_tick + arg);
        } else {
            for (n = 0u; n < arg; n++) {
                for (now_conv = 0u; now_conv < CONVERSIONS_PER_TICK; now_conv++) {
                    uint16_t saved = current;
                    if (dip_at != 0u && now_tick >= dip_at && now_tick < dip_at + 2u) {
                        current = (uint16_t)(current > 3u * DIP ? current - 3u * DIP : 0u);
                    }
                    t0 = NOW();
                    coil_pwm_isr();
                    worst_pwm = worst(worst_pwm, t0);
                    t0 = NOW();
                    coil_adc_isr();
                    worst_adc = worst(worst_adc, t0);
                    current = saved;
#if defined(COIL_HOLD_HYSTERETIC) || defined(COIL_HOLD_OFF_TIME)
                    /* the comparator / window watchdog and the off-time one-shot */
                    t0 = NOW();
                    if (off_pending) {
                        off_pending = 0u;
                        coil_off_timer_isr_or_none();
                    } else if (win_armed && current >= win_high) {
                        coil_threshold_isr(1u);
                    } else if (win_armed && win_low != 0u && current < win_low) {
                        coil_threshold_isr(0u);
                    }
                    worst_threshold = worst(worst_threshold, t0);
#endif
                    drain();
                    model();
                }
                t0 = NOW();
                coil_tick();
                worst_tick = worst(worst_tick, t0);
                drain();
                now_tick++;
            }
        }
        uart_put('x');
        put_field(coil_state());
        put_field(coil_fault());
        uart_put('\n');
    }
    report("adc_isr", worst_adc);
    report("pwm_isr", worst_pwm);
    report("tick", worst_tick);
#if defined(COIL_HOLD_HYSTERETIC) || defined(COIL_HOLD_OFF_TIME)
    report("threshold_isr", worst_threshold);   /* threshold or off-timer handler, with the hooks */
#else
    (void)worst_threshold;
#endif
    put_text("end\n");
    stop();
    return 0;
}
