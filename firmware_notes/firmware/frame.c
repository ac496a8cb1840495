#include "frame.h"

#include "crc16.h"

/* A bounded writer into the caller's line buffer; once a byte would not fit, it only remembers that. */
struct writer {
    char *out;
    uint8_t len;
    uint8_t full;
};

/* Room for the body: the line limit less '*', four CRC digits and '\n'. */
#define BODY_MAX (FRAME_MAX_LINE - 6u)

static const char HEX[16] = {'0', '1', '2', '3', '4', '5', '6', '7', '8', '9', 'A', 'B', 'C', 'D', 'E', 'F'};

static void put(struct writer *w, char c)
{
    if (w->len >= BODY_MAX) {
        w->full = 1;
        return;
    }
    w->out[w->len++] = c;
}

static void put_str(struct writer *w, const char *s)
{
    while (*s)
        put(w, *s++);
}

/* Fixed-width upper-case hex, most significant digit first: shifts and a 16-entry table, no division. */
static void put_hex(struct writer *w, uint32_t v, uint8_t digits)
{
    while (digits--)
        put(w, HEX[(v >> (4u * digits)) & 0xFu]);
}

/* Decimal without leading zeros; only header fields use it, so the software division is rare. */
static void put_dec(struct writer *w, uint16_t v)
{
    char digits[5];
    uint8_t n = 0;

    do {
        digits[n++] = (char)('0' + v % 10u);
        v /= 10u;
    } while (v);
    while (n)
        put(w, digits[--n]);
}

static void put_key(struct writer *w, const char *key)
{
    put(w, ' ');
    put_str(w, key);
    put(w, '=');
}

/* Close the line: '*', the CRC of the body as four hex digits, '\n'. The room for these was kept free. */
static uint8_t finish(struct writer *w)
{
    uint16_t crc;
    uint8_t i;

    if (w->full)
        return 0;
    crc = crc16(w->out, w->len);
    w->out[w->len++] = '*';
    for (i = 4; i--;)
        w->out[w->len++] = HEX[(crc >> (4u * i)) & 0xFu];
    w->out[w->len++] = '\n';
    return w->len;
}

uint8_t frame_data(char *out, uint16_t seq, uint32_t t_us, const uint16_t *counts, uint8_t n)
{
    struct writer w = {out, 0, 0};

    if (n == 0 || n > FRAME_MAX_CHANNELS)
        return 0;
    put(&w, 'D');
    put(&w, ' ');
    put_hex(&w, seq, 4);
    put(&w, ' ');
    put_hex(&w, t_us, 8);
    while (n--) {
        put(&w, ' ');
        put_hex(&w, *counts++, 4);
    }
    return finish(&w);
}

uint8_t frame_header(char *out, const struct frame_info *info, const char *why)
{
    struct writer w = {out, 0, 0};

    put(&w, 'H');
    put_key(&w, "fw");
    put_str(&w, info->fw);
    put_key(&w, "ver");
    put_str(&w, info->ver);
    put_key(&w, "bits");
    put_dec(&w, info->bits);
    put_key(&w, "vref_mv");
    put_dec(&w, info->vref_mv);
    put_key(&w, "rate_hz");
    put_dec(&w, info->rate_hz);
    put_key(&w, "ch");
    put_str(&w, info->channels);
    put_key(&w, "why");
    put_str(&w, why);
    if (info->extra && *info->extra) {
        put(&w, ' ');
        put_str(&w, info->extra);
    }
    return finish(&w);
}

uint8_t frame_answer(char *out, const char *word, const char *text)
{
    struct writer w = {out, 0, 0};

    put(&w, 'A');
    put(&w, ' ');
    put_str(&w, word);
    if (text && *text) {
        put(&w, ' ');
        put_str(&w, text);
    }
    return finish(&w);
}
