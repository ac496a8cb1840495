#include "command.h"

#include "crc16.h"
#include "frame.h"

void cmd_reader_init(struct cmd_reader *r)
{
    r->len = 0;
    r->overflow = 0;
}

uint8_t cmd_reader_push(struct cmd_reader *r, char c, uint16_t max_rate_hz, struct cmd *out)
{
    uint8_t overflowed;
    uint8_t len;

    if (c != '\n') {
        /* Past the buffer, keep nothing but the fact, so a long line costs no memory and cannot be
         * mistaken for a command by its tail. */
        if (r->len < CMD_LINE_MAX)
            r->buf[r->len++] = c;
        else
            r->overflow = 1;
        return 0;
    }
    overflowed = r->overflow;
    len = r->len;
    cmd_reader_init(r);
    if (overflowed) {
        out->kind = CMD_ERR_CMD;
        return 1;
    }
    cmd_parse(r->buf, len, max_rate_hz, out);
    return out->kind != CMD_NONE;
}

static int8_t nibble(char c)
{
    if (c >= '0' && c <= '9')
        return (int8_t)(c - '0');
    if (c >= 'A' && c <= 'F')
        return (int8_t)(c - 'A' + 10);
    if (c >= 'a' && c <= 'f')
        return (int8_t)(c - 'a' + 10);
    return -1;
}

/* 1 if the line ends in *CCCC and CCCC (either case) is the CRC of the bytes before the '*'. */
static uint8_t crc_ok(const char *line, uint8_t len)
{
    uint16_t sent = 0;
    uint8_t i;

    if (len < 5 || line[len - 5] != '*')
        return 0;
    for (i = (uint8_t)(len - 4); i < len; i++) {
        int8_t v = nibble(line[i]);
        if (v < 0)
            return 0;
        sent = (uint16_t)((sent << 4) | (uint8_t)v);
    }
    return crc16(line, (uint8_t)(len - 5)) == sent;
}

static uint8_t is_token_char(char c)
{
    return (c >= '0' && c <= '9') || (c >= 'A' && c <= 'Z') || (c >= 'a' && c <= 'z');
}

static uint8_t starts_with(const char *body, uint8_t len, const char *prefix)
{
    uint8_t i;

    for (i = 0; prefix[i]; i++)
        if (i >= len || body[i] != prefix[i])
            return 0;
    return 1;
}

static void parse_ping(const char *token, uint8_t len, struct cmd *out)
{
    uint8_t i;

    out->kind = CMD_ERR_CMD;
    if (len == 0 || len > CMD_TOKEN_MAX)
        return;
    for (i = 0; i < len; i++) {
        if (!is_token_char(token[i]))
            return;
        out->token[i] = token[i];
    }
    out->token[len] = '\0';
    out->kind = CMD_PING;
}

/* Decimal digits only; anything else, or a value outside 1..max, is refused. Accumulating in 32 bits with
 * an early stop keeps "!R 99999999999" from wrapping round into an accepted value. */
static void parse_rate(const char *arg, uint8_t len, uint16_t max_rate_hz, struct cmd *out)
{
    uint32_t hz = 0;
    uint8_t i;

    out->kind = CMD_ERR_RATE;
    if (len == 0)
        return;
    for (i = 0; i < len; i++) {
        if (arg[i] < '0' || arg[i] > '9')
            return;
        hz = hz * 10u + (uint32_t)(arg[i] - '0');
        if (hz > max_rate_hz)
            return;
    }
    if (hz == 0)
        return;
    out->rate_hz = (uint16_t)hz;
    out->kind = CMD_RATE;
}

void cmd_parse(const char *line, uint8_t len, uint16_t max_rate_hz, struct cmd *out)
{
    uint8_t body;

    out->kind = CMD_NONE;
    if (len && line[len - 1] == '\r')
        len--;
    if (len == 0)
        return;
    if (!crc_ok(line, len)) {
        out->kind = CMD_ERR_CRC;
        return;
    }
    body = (uint8_t)(len - 5);
    if (body == 2 && starts_with(line, body, "?H"))
        out->kind = CMD_HEADER;
    else if (starts_with(line, body, "?P "))
        parse_ping(line + 3, (uint8_t)(body - 3), out);
    else if (starts_with(line, body, "!R "))
        parse_rate(line + 3, (uint8_t)(body - 3), max_rate_hz, out);
    else
        out->kind = CMD_ERR_CMD;
}

/* Five decimal digits at most: the rate is a uint16_t. */
static void rate_text(char *text, uint16_t hz)
{
    char digits[5];
    uint8_t n = 0;

    do {
        digits[n++] = (char)('0' + hz % 10u);
        hz /= 10u;
    } while (hz);
    while (n)
        *text++ = digits[--n];
    *text = '\0';
}

uint8_t cmd_answer(char *out, const struct cmd *c)
{
    char text[6];

    switch (c->kind) {
    case CMD_PING:
        return frame_answer(out, "pong", c->token);
    case CMD_RATE:
        rate_text(text, c->rate_hz);
        return frame_answer(out, "rate", text);
    case CMD_ERR_CRC:
        return frame_answer(out, "err", "crc");
    case CMD_ERR_CMD:
        return frame_answer(out, "err", "cmd");
    case CMD_ERR_RATE:
        return frame_answer(out, "err", "rate");
    default:
        return 0;
    }
}

const char *cmd_header_why(const struct cmd *c)
{
    if (c->kind == CMD_HEADER)
        return "ask";
    if (c->kind == CMD_RATE)
        return "rate";
    return 0;
}
