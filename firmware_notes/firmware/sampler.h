/* Sample sets taken on TIMER1's schedule into a small ring that the main loop empties.
 *
 * TIMER1 counts in CTC mode (clear on compare match with OCR1A) at F_CPU / 64, 4 us a tick at 16 MHz
 * (F_CPU / 256 below 4 Hz, where a period no longer fits in 16 bits); each compare match is one sample
 * period and starts one sample set. The device clock sent on the wire adds up the periods the timer has
 * counted, in microseconds, so it runs from the crystal (PROTOCOL.md section 3), and a set that is lost
 * (the ADC still busy, the ring full) still moves it on. */
#ifndef RAILTAP_SAMPLER_H
#define RAILTAP_SAMPLER_H

#include "config.h"

#include <stdint.h>

struct sample {
    uint16_t seq;
    uint32_t t_us;
    uint16_t counts[CHANNELS];
};

/* Start sampling at rate_hz (1 to MAX_RATE_HZ); call with interrupts off, before sei(). */
void sampler_init(uint16_t rate_hz);

/* Take the oldest sample set from the ring; 1 if there was one. */
uint8_t sampler_pop(struct sample *out);

/* Change the rate. The sample set already scheduled keeps the old spacing; the next one is the first at
 * the new rate. */
void sampler_set_rate(uint16_t rate_hz);

/* 1 once the new rate is in force and every sample set taken at the old rate has left the ring: the point
 * where the protocol wants the "A rate" answer and the why=rate header. */
uint8_t sampler_rate_switched(void);

#endif
