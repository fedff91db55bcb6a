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

#include "target_io.h"   /* uart_put, start_clock, NOW (AVR: Timer1 at clk/1), stop, put_ */

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
    put_field(cycles);
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
