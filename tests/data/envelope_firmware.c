/*
 * What the firmware takes from the generated header, for the envelope tests
 * (tests/test_envelope_sweep.py). Built with the header forced in:
 *     gcc -std=c11 -Wall -Wextra -Wpedantic -Werror -include coil_drive.h envelope_firmware.c
 * It prints the header's constants, then for every supply-sense code read from stdin
 * (one per line) the hold compare and the peak ticks the firmware would use at it:
 *     code <code> <compare or -1> <peak ticks>
 * The macros are the header's with the default prefix COIL; names that changed with
 * issue 11 are accepted under both spellings.
 */
#include <stdio.h>

#if defined(COIL_TIMER_PERIOD_COUNTS)
#define ENV_PERIOD COIL_TIMER_PERIOD_COUNTS
#else
#define ENV_PERIOD COIL_TIMER_PERIOD_TICKS
#endif

#if defined(COIL_HOLD_COMPARE_COUNTS)
#define ENV_FIXED_COMPARE COIL_HOLD_COMPARE_COUNTS
#elif defined(COIL_HOLD_COMPARE_TICKS)
#define ENV_FIXED_COMPARE COIL_HOLD_COMPARE_TICKS
#else
#define ENV_FIXED_COMPARE (-1)
#endif

/* Which hold the firmware runs: 0 fixed compare, 1 the supply table, 2 current mode.
 * A header without the regulation macros is today's, whose firmware uses the table. */
#if defined(COIL_HOLD_REGULATION) && defined(COIL_REGULATION_FIXED) && \
    COIL_HOLD_REGULATION == COIL_REGULATION_FIXED
#define ENV_REGULATION 0
#elif defined(COIL_HOLD_REGULATION) && defined(COIL_REGULATION_CURRENT) && \
    COIL_HOLD_REGULATION == COIL_REGULATION_CURRENT
#define ENV_REGULATION 2
#elif defined(COIL_HOLD_REGULATION) && defined(COIL_REGULATION_CLOSED_LOOP) && \
    COIL_HOLD_REGULATION == COIL_REGULATION_CLOSED_LOOP
#define ENV_REGULATION 3
#else
#define ENV_REGULATION 1
#endif

static const char *const regulation_name[] = {"fixed", "supply_table", "current", "closed_loop"};

static long compare_for(unsigned int code)
{
#if ENV_REGULATION == 0
    (void)code;
    return (long)ENV_FIXED_COMPARE;
#elif ENV_REGULATION == 1
    return (long)coil_hold_compare_for_supply((uint16_t)code);
#else
    (void)code;
    return -1L;
#endif
}

static long peak_ticks_for(unsigned int code)
{
#if defined(COIL_PEAK_COMPENSATED) && COIL_PEAK_COMPENSATED == 1
    return (long)coil_peak_ticks_for_supply((uint16_t)code);
#else
    (void)code;
    return (long)COIL_PEAK_TICKS;
#endif
}

int main(void)
{
    unsigned int code;
    printf("regulation %s\n", regulation_name[ENV_REGULATION]);
    printf("period %lu\n", (unsigned long)ENV_PERIOD);
    printf("prescaler %lu\n", (unsigned long)COIL_TIMER_PRESCALER);
    printf("clock %lu\n", (unsigned long)COIL_TIMER_CLOCK_HZ);
    printf("over_current_code %lu\n", (unsigned long)COIL_ADC_OVER_CURRENT_CODE);
#if ENV_REGULATION == 3
    printf("setpoint_code %lu\n", (unsigned long)COIL_LOOP_SETPOINT_CODE);
#endif
    while (scanf("%u", &code) == 1) {
        printf("code %u %ld %ld\n", code, compare_for(code), peak_ticks_for(code));
    }
    return 0;
}
