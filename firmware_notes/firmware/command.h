/* Host commands (PROTOCOL.md section 5): gathering received bytes into lines, checking their CRC, and
 * deciding what to answer. No AVR dependency, so the host compiler builds it for the tests. */
#ifndef RAILTAP_COMMAND_H
#define RAILTAP_COMMAND_H

#include <stdint.h>

/* The longest command, "?P" with an 8-character token and its CRC, is 16 bytes; 24 leaves room for a
 * stray '\r' (PROTOCOL.md section 5). A longer line is discarded and answered "A err cmd". */
#define CMD_LINE_MAX 24u
#define CMD_TOKEN_MAX 8u

enum cmd_kind {
    CMD_NONE,     /* an empty line: no reply */
    CMD_HEADER,   /* ?H: reply with a header, why=ask */
    CMD_PING,     /* ?P token: reply "A pong token" */
    CMD_RATE,     /* !R hz, accepted: reply "A rate hz", then a header, why=rate */
    CMD_ERR_CRC,  /* no *CCCC, or a wrong one */
    CMD_ERR_CMD,  /* good CRC but no such command, a bad token, or a line too long */
    CMD_ERR_RATE  /* !R with a rate out of range or not a decimal integer */
};

struct cmd {
    enum cmd_kind kind;
    uint16_t rate_hz;                /* for CMD_RATE */
    char token[CMD_TOKEN_MAX + 1];   /* for CMD_PING, NUL-terminated */
};

/* Receive state: the line so far, and whether it already overflowed the buffer. */
struct cmd_reader {
    char buf[CMD_LINE_MAX];
    uint8_t len;
    uint8_t overflow;
};

void cmd_reader_init(struct cmd_reader *r);

/* Feed one received byte. Returns 1 when it ended a non-empty line, with the verdict in *out; else 0. */
uint8_t cmd_reader_push(struct cmd_reader *r, char c, uint16_t max_rate_hz, struct cmd *out);

/* Judge one complete line (without its '\n'; a trailing '\r' is allowed). */
void cmd_parse(const char *line, uint8_t len, uint16_t max_rate_hz, struct cmd *out);

/* The answer line for a verdict, written into out (FRAME_MAX_LINE bytes); returns its length, or 0 when
 * the verdict is answered by a header alone (CMD_HEADER) or by nothing (CMD_NONE). */
uint8_t cmd_answer(char *out, const struct cmd *c);

/* The why= of the header a verdict is answered with ("ask" for ?H, "rate" after an accepted !R), or 0. */
const char *cmd_header_why(const struct cmd *c);

#endif
