/*
 * A scripted run of the generated stream encoder (prefix "sim"), built twice: for an
 * ATmega328P and run under simavr, and for the host. Both print the same lines:
 *   f <hex>        the bytes of the frames one poll/flush/send call wrote
 * and, on the AVR, the worst cycle counts of the handlers, read from Timer1 at clk/1:
 *   c <name> <cycles>
 * The write hook copies into RAM (as a DMA hand-off would), so the timed calls hold no
 * UART waits; the bytes go out on the UART after each timed call.
 */
#include <stddef.h>
#include <stdint.h>
#include "sim_stream.h"

#define SAMPLES 600u
#define POLL_EVERY 16u
#define SINK 400u

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
    UBRR0 = 0u;                              /* 1 Mbaud at 16 MHz: output only */
    UCSR0B = (uint8_t)(1u << TXEN0);
    TCCR1A = 0u;
    TCCR1B = (uint8_t)(1u << CS10);          /* Timer1 counts CPU cycles */
}
#define NOW() TCNT1
static void stop(void)
{
    cli();
    sleep_cpu();                             /* simavr ends the run here */
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

static uint8_t sink_bytes[SINK];
static size_t sink_len;
static uint8_t sink_overflow;

static void sink(void *context, const uint8_t *bytes, size_t count)
{
    size_t i;
    (void)context;
    for (i = 0u; i < count; i++) {
        if (sink_len < SINK) {
            sink_bytes[sink_len++] = bytes[i];
        } else {
            sink_overflow = 1u;
        }
    }
}

static void put_text(const char *text)
{
    while (*text != '\0') {
        uart_put(*text++);
    }
}

static void put_number(uint16_t value)
{
    char digits[6];
    unsigned int n = 0u;
    do {
        digits[n++] = (char)('0' + value % 10u);
        value = (uint16_t)(value / 10u);
    } while (value != 0u);
    while (n != 0u) {
        uart_put(digits[--n]);
    }
}

/* Send what the last call wrote as one "f" line. */
static void drain(void)
{
    static const char hex[] = "0123456789ABCDEF";
    size_t i;
    if (sink_len == 0u) {
        return;
    }
    put_text("f ");
    for (i = 0u; i < sink_len; i++) {
        uart_put(hex[sink_bytes[i] >> 4]);
        uart_put(hex[sink_bytes[i] & 0x0Fu]);
    }
    uart_put('\n');
    sink_len = 0u;
}

static uint16_t code_at(uint16_t i)
{
    if ((i / 50u) % 4u == 3u) {
        return 0u;                           /* switch off: a run of zeros */
    }
    return (uint16_t)((((uint32_t)i * 40503u) >> 4) & 0x03FFu);   /* 10-bit codes */
}

static uint16_t worst_push, worst_drop, worst_queue, worst_frame, worst_event, worst_flush, overhead;

static void report(const char *name, uint16_t cycles)
{
    put_text("c ");
    put_text(name);
    uart_put(' ');
    put_number(cycles);
    uart_put('\n');
}

int main(void)
{
    static sim_stream_t s;
    sim_stream_info_t info;
    uint16_t i, t0, dt, code, capacity = (uint16_t)(SIM_STREAM_BLOCKS * SIM_STREAM_SAMPLES_PER_FRAME);

    start_clock();
    t0 = NOW();
    overhead = (uint16_t)(NOW() - t0);       /* the two timer reads themselves */
    info.rate_numerator = 15000u;
    info.rate_denominator = 1u;
    info.adc_bits = 10u;
    info.zero_code = 0u;
    info.amps_per_code = 0.009765625f;
    info.has_position_switch = 0u;
    info.firmware_id = "simavr run";
    sim_stream_init(&s, sink, NULL);
    (void)sim_stream_send_info(&s, &info);
    drain();

    for (i = 0u; i < SAMPLES; i++) {
        if (i == 20u || i == 170u || i == 480u) {
            uint8_t kind = i == 20u ? SIM_EVENT_ON : i == 170u ? SIM_EVENT_PEAK_END : SIM_EVENT_OFF;
            t0 = NOW();
            (void)sim_stream_event(&s, kind, 0);
            dt = (uint16_t)(NOW() - t0 - overhead);
            worst_queue = dt > worst_queue ? dt : worst_queue;
        }
        code = code_at(i);
        t0 = NOW();
        (void)sim_stream_push(&s, code);
        dt = (uint16_t)(NOW() - t0 - overhead);
        worst_push = dt > worst_push ? dt : worst_push;
        if (i % POLL_EVERY == POLL_EVERY - 1u) {
            uint8_t events = (uint8_t)(s.event_head - s.event_tail);
            uint8_t blocks = (uint8_t)(s.block_head - s.block_tail);
            t0 = NOW();
            (void)sim_stream_poll(&s);
            dt = (uint16_t)(NOW() - t0 - overhead);
            if (events == 0u && blocks == 1u) {
                worst_frame = dt > worst_frame ? dt : worst_frame;     /* one full SAMPLES frame */
            } else if (events == 1u && blocks == 0u) {
                worst_event = dt > worst_event ? dt : worst_event;     /* one EVENT frame */
            }
            drain();
        }
    }
    t0 = NOW();
    (void)sim_stream_flush(&s);
    worst_flush = (uint16_t)(NOW() - t0 - overhead);
    drain();

    /* The main loop stalls: the ring fills, then drops (reported in an OVERRUN event). */
    for (i = SAMPLES; i < SAMPLES + capacity + 10u; i++) {
        code = code_at(i);
        t0 = NOW();
        (void)sim_stream_push(&s, code);
        dt = (uint16_t)(NOW() - t0 - overhead);
        if (i < SAMPLES + capacity) {
            worst_push = dt > worst_push ? dt : worst_push;
        } else {
            worst_drop = dt > worst_drop ? dt : worst_drop;
        }
    }
    (void)sim_stream_poll(&s);
    drain();

    report("push", worst_push);                /* the host build reports 0 cycles */
    report("push_dropped", worst_drop);
    report("event", worst_queue);
    report("poll_one_samples_frame", worst_frame);
    report("poll_one_event_frame", worst_event);
    report("flush_partial_frame", worst_flush);
    put_text(sink_overflow ? "sink overflow\n" : "end\n");
    stop();
    return 0;
}
