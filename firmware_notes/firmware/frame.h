/* Line encoders of the wire protocol (PROTOCOL.md, sections 1 to 5): data, header and answer lines, each
 * written whole into a caller's buffer as BODY*CCCC\n. No AVR dependency, so the host compiler builds the
 * very same code for the tests that compare it with railtap's own decoder. */
#ifndef RAILTAP_FRAME_H
#define RAILTAP_FRAME_H

#include <stdint.h>

/* Longest line, newline included (PROTOCOL.md section 1, MAX_LINE). */
#define FRAME_MAX_LINE 160u
/* Channels per data line this firmware can send (the protocol allows 8; the ATmega328P build samples 4). */
#define FRAME_MAX_CHANNELS 8u

/* What a header line says about the device; strings must not contain spaces. */
struct frame_info {
    const char *fw;       /* firmware name */
    const char *ver;      /* firmware version */
    uint8_t bits;         /* ADC resolution */
    uint16_t vref_mv;     /* ADC reference */
    uint16_t rate_hz;     /* nominal sample-set rate */
    const char *channels; /* comma-separated names, in count order */
    const char *extra;    /* extra key=value pairs after why=, space-separated, or 0 */
};

/* Each encoder returns the line's length in bytes, newline included, or 0 if it would not fit in
 * FRAME_MAX_LINE (out must hold FRAME_MAX_LINE bytes; nothing useful is left in it then). */
uint8_t frame_data(char *out, uint16_t seq, uint32_t t_us, const uint16_t *counts, uint8_t n);
uint8_t frame_header(char *out, const struct frame_info *info, const char *why);
uint8_t frame_answer(char *out, const char *word, const char *text);

#endif
