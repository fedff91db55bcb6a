/*
 * What the scripted driver programs (driver_target.c, latch_target.c) share: the text
 * output (AVR: the UART, simavr prints it; Cortex-M under QEMU: Arm semihosting; host:
 * stdout), NOW() (AVR: Timer1 at clk/1, the handlers' cycles; elsewhere 0) and stop().
 */
#ifndef TARGET_IO_H
#define TARGET_IO_H
#include <stdint.h>

#ifdef __AVR__
#include <avr/interrupt.h>
#include <avr/io.h>
#include <avr/sleep.h>
static void uart_put(char c)
{
    while ((UCSR0A & (1u << UDRE0)) == 0u) {
    }
    UDR0 = (uint8_t)c;
}
static void start_clock(void)
{
    UBRR0 = 0u;
    UCSR0B = (uint8_t)(1u << TXEN0);
    TCCR1A = 0u;
    TCCR1B = (uint8_t)(1u << CS10);
}
#define NOW() TCNT1
static void stop(void)
{
    cli();
    sleep_cpu();
}
#elif defined(__arm__)
/* Bare metal on a QEMU Cortex-M machine (mps2-an385 / an386): the vector table and the
 * reset handler are in tests/data/cortex_start.c; the text goes out through Arm
 * semihosting (SYS_WRITEC, SYS_EXIT). The handlers are timed from QEMU's execution
 * trace (tests/cortex_trace.py), not from inside: NOW() reads nothing. */
static void semihost(uint32_t op, const void *arg)
{
    register uint32_t r0 __asm__("r0") = op;
    register const void *r1 __asm__("r1") = arg;
    __asm__ volatile("bkpt 0xab" : "+r"(r0) : "r"(r1) : "memory");
}
static void uart_put(char c)
{
    semihost(0x03u, &c);
}
static void start_clock(void)
{
}
#define NOW() 0u
static void stop(void)
{
    semihost(0x18u, (const void *)0x20026UL);   /* ADP_Stopped_ApplicationExit */
}
#else
#include <stdio.h>
static void uart_put(char c)
{
    (void)putchar(c);
}
static void start_clock(void)
{
}
#define NOW() 0u
static void stop(void)
{
}
#endif

static void put_text(const char *text)
{
    while (*text != '\0') {
        uart_put(*text++);
    }
}

static void put_number(uint32_t value)
{
    char digits[10];
    unsigned int n = 0u;
    do {
        digits[n++] = (char)('0' + value % 10u);
        value = value / 10u;
    } while (value != 0u);
    while (n != 0u) {
        uart_put(digits[--n]);
    }
}

static void put_field(uint32_t value)
{
    uart_put(' ');
    put_number(value);
}

#ifdef TARGET_LOG
/* The hooks log into RAM (TARGET_LOG entries), so the timed calls hold no UART waits;
 * drain_log() prints them: "<kind> <tick>[ <conversion>] <value>", an event's value (kind
 * x 256 + value) as two fields. */
static uint8_t log_kind[TARGET_LOG];
static int32_t log_value[TARGET_LOG];
static uint8_t log_len;

static void log_add(uint8_t kind, int32_t value)
{
    if (log_len < TARGET_LOG) {
        log_kind[log_len] = kind;
        log_value[log_len] = value;
        log_len++;
    }
}

static void drain_log(uint32_t tick, const uint16_t *conversion)
{
    uint8_t k;
    for (k = 0u; k < log_len; k++) {
        uart_put((char)log_kind[k]);
        put_field(tick);
        if (conversion != 0) {
            put_field(*conversion);
        }
        if (log_kind[k] == 'e') {
            put_field((uint32_t)log_value[k] >> 8);
            put_field((uint32_t)log_value[k] & 0xFFu);
        } else {
            put_field((uint32_t)log_value[k]);
        }
        uart_put('\n');
    }
    log_len = 0u;
}
#endif

#endif /* TARGET_IO_H */
