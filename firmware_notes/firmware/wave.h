/* The synthetic waveform of the emulation build: what each "ADC" channel reads for sample set n, counted
 * from 0 at start-up. The emulator has no ADC, so this stands in for it; the end-to-end test computes the
 * same values on its own and compares every recorded count with them. No AVR dependency.
 *
 * All four channels are 10-bit counts, like the ATmega328P's converter:
 *   ch 0, a rail:  800 counts with a triangle ripple of -4..+3, dipping to 600 (a 25 % brownout) for
 *                  samples 512..575 of every 1024;
 *   ch 1, a load:  100 + 150 * k counts, k = 0, 1, 2, 3 stepping every 256 samples;
 *   ch 2, a ramp:  n mod 1024 (every count value, so every hex digit pattern, goes over the wire);
 *   ch 3, a ramp down: 1023 - n mod 1024.
 * Only shifts and masks: the build runs it inside the timer interrupt. */
#ifndef RAILTAP_WAVE_H
#define RAILTAP_WAVE_H

#include <stdint.h>

#define WAVE_CHANNELS 4u

uint16_t wave_count(uint32_t n, uint8_t ch);

#endif
