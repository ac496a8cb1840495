/* Build settings of the reference firmware; each can be overridden from the make command line
 * (make CHANNELS=2 RATE_HZ=500 ...). */
#ifndef RAILTAP_CONFIG_H
#define RAILTAP_CONFIG_H

#ifndef F_CPU
#define F_CPU 16000000UL /* the crystal of common ATmega328P boards */
#endif

/* 1000000 baud divides 16 MHz exactly (the UART divides by 16 x (UBRR + 1); PROTOCOL.md section 8), as do
 * 250000, 500000 and 2000000. avr-libc's util/setbaud.h warns when a rate comes out more than 2 % off, and
 * -Werror makes that a build error: 115200 (2.1 % off at 16 MHz, and only about 190 sample sets a second of
 * 4 channels) is refused rather than left to garble the odd byte. */
#ifndef BAUD
#define BAUD 1000000UL
#endif

/* ADC inputs A0.. scanned per sample set, 1 to 4 (A4 and A5 are the I2C pins on most boards). */
#ifndef CHANNELS
#define CHANNELS 4
#endif

#ifndef RATE_HZ
#define RATE_HZ 1000 /* sample sets per second at start-up; the host may change it with !R */
#endif

/* ADC reference: AVcc (the board's 5 V; measure it and set VREF_MV to what you read) or the internal
 * 1.1 V band-gap (REF_INTERNAL=1), which suits a small shunt signal but is itself only good to about
 * +-10 % (ATmega328P datasheet, electrical characteristics, internal voltage reference; value from memory). */
#ifndef REF_INTERNAL
#define REF_INTERNAL 0
#endif
#ifndef VREF_MV
#if REF_INTERNAL
#define VREF_MV 1100
#else
#define VREF_MV 5000
#endif
#endif

/* Emulation: a synthetic waveform (wave.c) stands in for the ADC, which the emulator does not have. */
#ifndef RAILTAP_EMULATE
#define RAILTAP_EMULATE 0
#endif

#define FW_NAME "railtap-ref"
#define FW_VERSION "0.1"
#define ADC_BITS 10

#if CHANNELS == 1
#define CHANNEL_NAMES "a0"
#elif CHANNELS == 2
#define CHANNEL_NAMES "a0,a1"
#elif CHANNELS == 3
#define CHANNEL_NAMES "a0,a1,a2"
#elif CHANNELS == 4
#define CHANNEL_NAMES "a0,a1,a2,a3"
#else
#error "CHANNELS must be 1 to 4"
#endif

/* Highest rate !R accepts: the lower of what the ADC and what the UART can do, each used to 80 % at most.
 * ADC: 13 ADC clocks per conversion at F_CPU / 128 (104 us at 16 MHz; ATmega328P datasheet, ADC
 * conversion timing; value from memory). UART: 10 bits per byte, 21 + 5n bytes per data line
 * (PROTOCOL.md section 8). */
#define ADC_US_PER_CONVERSION (13UL * 128UL * 1000000UL / F_CPU)
#define ADC_MAX_HZ (800000UL / (ADC_US_PER_CONVERSION * CHANNELS))
#define UART_MAX_HZ (BAUD * 8UL / 100UL / (21UL + 5UL * CHANNELS))
#define MAX_RATE_HZ ((uint16_t)(ADC_MAX_HZ < UART_MAX_HZ ? ADC_MAX_HZ : UART_MAX_HZ))

#endif
