#include "sampler.h"

#include "config.h"
#include "wave.h"

#include <avr/interrupt.h>
#include <avr/io.h>
#include <util/atomic.h>

#if (64000000UL % F_CPU) || (256000000UL % F_CPU)
#error "F_CPU must divide 64 MHz so that a timer tick is a whole number of microseconds"
#endif

/* Rates from this one up use the /64 prescaler: 250000 / 4 = 62500 ticks still fit in 16 bits. */
#define FAST_MIN_HZ 4u

/* 16 sets: with a 256-byte transmit buffer in front, the main loop may stall for 16 sample periods before
 * a set is lost, and a lost set still uses up its sequence number, so the host sees the gap. */
#define RING_SIZE 16u

static struct sample ring[RING_SIZE];
static volatile uint8_t ring_head;
static volatile uint8_t ring_tail;

static uint32_t clock_us; /* device clock at the compare match now being served */
static uint32_t next_n;   /* sample sets taken since start-up; its low 16 bits are the sequence */

/* The period as a whole number of ticks and a remainder spread Bresenham-style (one extra tick now and
 * then), so a rate that does not divide the tick rate still averages out exactly. */
static uint8_t clock_select; /* TCCR1B clock-select bits */
static uint8_t us_per_tick;
static uint16_t period_whole;
static uint16_t period_rem;
static uint16_t period_hz;
static uint16_t period_acc;
static uint16_t period_ticks; /* length of the period now being counted */

static volatile uint16_t pending_hz;  /* a rate waiting for the next sample set, or 0 */
static volatile uint8_t rate_applied; /* set when pending_hz took effect */
static volatile uint16_t rate_seq;    /* sequence of the first set at the new rate */

#if !RAILTAP_EMULATE
static struct sample scan;          /* the set being converted, channel by channel */
static volatile uint8_t scan_index; /* next channel to store; CHANNELS when idle */
#if REF_INTERNAL
#define ADMUX_REF (_BV(REFS1) | _BV(REFS0))
#else
#define ADMUX_REF _BV(REFS0)
#endif
#endif

static void set_period(uint16_t rate_hz)
{
    uint32_t ticks_per_s;

    if (rate_hz >= FAST_MIN_HZ) {
        clock_select = _BV(CS11) | _BV(CS10); /* F_CPU / 64 */
        ticks_per_s = F_CPU / 64UL;
    } else {
        clock_select = _BV(CS12); /* F_CPU / 256 */
        ticks_per_s = F_CPU / 256UL;
    }
    us_per_tick = (uint8_t)(1000000UL / ticks_per_s);
    period_whole = (uint16_t)(ticks_per_s / rate_hz);
    period_rem = (uint16_t)(ticks_per_s % rate_hz);
    period_hz = rate_hz;
    period_acc = 0;
}

/* The length of the next period, in ticks, with the remainder's extra tick when it is due. */
static uint16_t next_period(void)
{
    period_acc += period_rem;
    if (period_acc >= period_hz) {
        period_acc -= period_hz;
        return (uint16_t)(period_whole + 1u);
    }
    return period_whole;
}

/* Arm the compare for the next period. In CTC mode the counter restarts from 0 at each match, and the
 * match happens when it reaches OCR1A, so a period of p ticks needs OCR1A = p - 1. This runs at the start
 * of the interrupt, while the counter is still far below any period this firmware uses. */
static void arm(uint16_t ticks)
{
    period_ticks = ticks;
    OCR1A = (uint16_t)(ticks - 1u);
}

static void ring_push(const struct sample *s)
{
    uint8_t next = (uint8_t)((ring_head + 1u) % RING_SIZE);

    if (next == ring_tail)
        return; /* full: the set is lost, and its sequence number with it */
    ring[ring_head] = *s;
    ring_head = next;
}

#if RAILTAP_EMULATE
/* The emulation build: the synthetic waveform, computed on the spot, stands in for a scan. */
static void start_set(uint32_t n, uint32_t t_us)
{
    struct sample s;
    uint8_t k;

    s.seq = (uint16_t)n;
    s.t_us = t_us;
    for (k = 0; k < CHANNELS; k++)
        s.counts[k] = wave_count(n, k);
    ring_push(&s);
}

static uint8_t converting_before(uint16_t seq)
{
    (void)seq;
    return 0; /* a synthetic set is in the ring as soon as it is taken */
}

static void adc_init(void)
{
}
#else
/* Start converting channel 0; ADC_vect takes the rest one by one, so no interrupt waits on the ADC. */
static void start_set(uint32_t n, uint32_t t_us)
{
    if (scan_index < CHANNELS)
        return; /* the last scan is still converting: this set is lost, its number used up */
    scan.seq = (uint16_t)n;
    scan.t_us = t_us;
    scan_index = 0;
    ADMUX = ADMUX_REF;
    ADCSRA |= _BV(ADSC);
}

ISR(ADC_vect)
{
    uint8_t k = scan_index;

    scan.counts[k] = ADC;
    if (++k < CHANNELS) {
        ADMUX = (uint8_t)(ADMUX_REF | k);
        ADCSRA |= _BV(ADSC);
    } else {
        ring_push(&scan);
    }
    scan_index = k;
}

/* 1 if a set numbered before seq is still being converted (not yet in the ring). */
static uint8_t converting_before(uint16_t seq)
{
    return scan_index < CHANNELS && (int16_t)(scan.seq - seq) < 0;
}

static void adc_init(void)
{
    /* F_CPU / 128 = 125 kHz at 16 MHz, inside the 50 to 200 kHz the datasheet asks for full 10-bit
     * resolution (ATmega328P datasheet, ADC prescaling; value from memory). */
    scan_index = CHANNELS;
    ADMUX = ADMUX_REF;
    ADCSRA = _BV(ADEN) | _BV(ADIE) | _BV(ADPS2) | _BV(ADPS1) | _BV(ADPS0);
    DIDR0 = (uint8_t)((1u << CHANNELS) - 1u); /* digital input buffers off on the analog pins */
}
#endif

/* One compare match: the period that just ended moves the clock on, a set is taken at the new time, and
 * the next period is armed, at a new rate if one is pending (so the set just taken is the last at the
 * old spacing). */
ISR(TIMER1_COMPA_vect)
{
    clock_us += (uint32_t)period_ticks * us_per_tick;
    if (pending_hz) {
        set_period(pending_hz);
        TCCR1B = (uint8_t)(_BV(WGM12) | clock_select);
        pending_hz = 0;
        rate_seq = (uint16_t)(next_n + 1u);
        rate_applied = 1;
    }
    arm(next_period());
    start_set(next_n++, clock_us);
}

void sampler_init(uint16_t rate_hz)
{
    adc_init();
    set_period(rate_hz);
    TCCR1A = 0;
    TCCR1B = _BV(WGM12); /* CTC on OCR1A, clock still stopped */
    TCNT1 = 0;
    arm(next_period());
    TIFR1 = _BV(OCF1A);                              /* clear a stale flag (written as a one) */
    TIMSK1 = _BV(OCIE1A);
    TCCR1B = (uint8_t)(_BV(WGM12) | clock_select); /* the clock starts last */
}

uint8_t sampler_pop(struct sample *out)
{
    uint8_t got = 0;

    ATOMIC_BLOCK(ATOMIC_RESTORESTATE)
    {
        if (ring_tail != ring_head) {
            *out = ring[ring_tail];
            ring_tail = (uint8_t)((ring_tail + 1u) % RING_SIZE);
            got = 1;
        }
    }
    return got;
}

void sampler_set_rate(uint16_t rate_hz)
{
    ATOMIC_BLOCK(ATOMIC_RESTORESTATE)
    {
        pending_hz = rate_hz;
        rate_applied = 0;
    }
}

uint8_t sampler_rate_switched(void)
{
    uint8_t done;

    ATOMIC_BLOCK(ATOMIC_RESTORESTATE)
    {
        /* Old-rate sets all have sequence numbers before rate_seq; once the oldest set in the ring is
         * rate_seq or later (or the ring is empty) they are all sent. */
        done = rate_applied && !converting_before(rate_seq) &&
               (ring_tail == ring_head || (int16_t)(ring[ring_tail].seq - rate_seq) >= 0);
    }
    return done;
}
