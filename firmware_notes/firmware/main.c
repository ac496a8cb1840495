/* railtap reference firmware for the ATmega328P: samples up to 4 ADC inputs on TIMER1's schedule and sends
 * them as the lines of PROTOCOL.md, answering the host's three commands between data lines.
 *
 * Interrupts do the timing (TIMER1 compare: take a set; ADC: next channel; USART: bytes in and out); the
 * main loop only formats lines and reads commands. It never sleeps and never waits in a delay loop, so
 * the same code runs in an emulator, where instruction timing is not that of the real part. */
#include "command.h"
#include "config.h"
#include "frame.h"
#include "sampler.h"
#include "uart.h"

#include <avr/interrupt.h>
#include <stdint.h>

/* A header is due every 10 s while running (PROTOCOL.md section 4), measured on the device clock. */
#define TICK_HEADER_US 10000000UL

static char line[FRAME_MAX_LINE];

static struct frame_info info = {
    FW_NAME, FW_VERSION, ADC_BITS, VREF_MV, RATE_HZ, CHANNEL_NAMES,
#if RAILTAP_EMULATE
    "adc=synthetic", /* an extra key (the host keeps it with the header): this run is not a measurement */
#else
    "adc=avr",
#endif
};

static struct cmd_reader reader;
static struct cmd reply;            /* the command being answered; kind CMD_NONE when there is none */
static const char *header_why;      /* a header due, and why; 0 when none */
static uint8_t rate_wait;           /* an accepted !R waits for the last old-rate line to go out */
static uint16_t new_rate_hz;
static uint8_t clock_seen;          /* a data line has been sent, so last_us means something */
static uint32_t last_us;            /* device clock of the last data line sent */
static uint32_t header_us;          /* device clock when the last header was sent */

static void send(uint8_t len)
{
    if (len)
        uart_write(line, len);
}

/* Take in received bytes until one command is complete, unless a reply is still owed: one command at a
 * time keeps the replies in order, and the rest wait in the receive buffer. */
static void read_commands(void)
{
    int16_t c;

    if (reply.kind != CMD_NONE || header_why || rate_wait)
        return;
    while ((c = uart_read()) >= 0) {
        if (!cmd_reader_push(&reader, (char)c, MAX_RATE_HZ, &reply))
            continue;
        header_why = cmd_header_why(&reply);
        if (reply.kind == CMD_HEADER) {
            reply.kind = CMD_NONE; /* answered by the header alone */
        } else if (reply.kind == CMD_RATE) {
            new_rate_hz = reply.rate_hz;
            sampler_set_rate(new_rate_hz);
            rate_wait = 1;
        }
        return;
    }
}

static void send_header(void)
{
    send(frame_header(line, &info, header_why));
    header_why = 0;
    header_us = last_us;
}

static void send_data(const struct sample *s)
{
    send(frame_data(line, s->seq, s->t_us, s->counts, CHANNELS));
    last_us = s->t_us;
    if (!clock_seen) {
        clock_seen = 1;
        header_us = s->t_us; /* the boot header went just before */
    }
    if (!header_why && last_us - header_us >= TICK_HEADER_US)
        header_why = "tick";
}

/* One line per call, whole, and only when the transmit buffer has room for the longest line: an answer
 * first, then a header, then data. While a rate change is pending, only old-rate data may go. */
static void send_next_line(void)
{
    struct sample s;

    if (uart_tx_free() < FRAME_MAX_LINE)
        return;
    if (rate_wait && sampler_rate_switched()) {
        rate_wait = 0;
        info.rate_hz = new_rate_hz;
    }
    if (!rate_wait && reply.kind != CMD_NONE) {
        send(cmd_answer(line, &reply));
        reply.kind = CMD_NONE;
    } else if (!rate_wait && header_why) {
        send_header();
    } else if (sampler_pop(&s)) {
        send_data(&s);
    }
}

int main(void)
{
    uart_init();
    cmd_reader_init(&reader);
    sampler_init(RATE_HZ);
    sei();
    /* A lone newline first: it ends whatever half line the host holds from before a reset, so the boot
     * header is read cleanly (PROTOCOL.md section 6.13). */
    line[0] = '\n';
    send(1);
    header_why = "boot";
    for (;;) {
        read_commands();
        send_next_line();
    }
}
