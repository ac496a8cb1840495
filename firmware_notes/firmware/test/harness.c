/* Host-side test harness: runs the firmware's own encoder, command and waveform code (built with the host
 * compiler) on requests read from stdin, one per line, and prints exactly what the firmware would send.
 * tests/test_firmware.py drives it and checks the output against railtap's Python encoder and decoder.
 *
 * Requests (numbers in hex unless noted):
 *   crc TEXT                         the CRC of TEXT (everything after "crc "), as 4 hex digits
 *   data SEQ T C0 [C1 ...]           a data line
 *   header FW VER BITS VREF RATE CH WHY [EXTRA...]   a header line (BITS, VREF, RATE decimal)
 *   answer WORD [TEXT]               an answer line
 *   command MAX HEXBYTES             the reply to the bytes (hex-encoded, so any byte can be sent), fed one
 *                                    by one through the command reader with MAX (decimal) as the highest
 *                                    rate; prints the answer line and/or "header WHY", or "none"
 *   wave N COUNT                     COUNT lines of the four channels' counts (decimal) for n = N, N+1, ...
 */
#include "command.h"
#include "crc16.h"
#include "frame.h"
#include "wave.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define REQUEST_MAX 1024

static char line[FRAME_MAX_LINE];

static void emit(uint8_t len)
{
    if (len == 0)
        printf("too long\n");
    else
        fwrite(line, 1, len, stdout);
}

static unsigned long hex(const char *s)
{
    return strtoul(s, NULL, 16);
}

static void do_data(char *args)
{
    uint16_t counts[FRAME_MAX_CHANNELS + 1];
    unsigned long seq = hex(strtok(args, " "));
    unsigned long t = hex(strtok(NULL, " "));
    uint8_t n = 0;
    char *tok;

    while ((tok = strtok(NULL, " ")) != NULL && n <= FRAME_MAX_CHANNELS)
        counts[n++] = (uint16_t)hex(tok);
    emit(frame_data(line, (uint16_t)seq, (uint32_t)t, counts, n));
}

static void do_header(char *args)
{
    struct frame_info info;
    const char *why;
    char *extra;

    info.fw = strtok(args, " ");
    info.ver = strtok(NULL, " ");
    info.bits = (uint8_t)atoi(strtok(NULL, " "));
    info.vref_mv = (uint16_t)atoi(strtok(NULL, " "));
    info.rate_hz = (uint16_t)atoi(strtok(NULL, " "));
    info.channels = strtok(NULL, " ");
    why = strtok(NULL, " ");
    extra = strtok(NULL, "");
    info.extra = extra;
    emit(frame_header(line, &info, why));
}

static void do_answer(char *args)
{
    char *word = strtok(args, " ");
    char *text = strtok(NULL, "");

    emit(frame_answer(line, word, text));
}

/* A verdict's replies in the firmware's order: the answer line, if any, then "header WHY" where a header
 * follows. */
static void print_reply(const struct cmd *reply)
{
    uint8_t len = cmd_answer(line, reply);
    const char *why = cmd_header_why(reply);

    if (len)
        emit(len);
    if (why)
        printf("header %s\n", why);
}

static void do_command(char *args)
{
    struct cmd_reader reader;
    struct cmd reply;
    uint16_t max_rate_hz = (uint16_t)atoi(strtok(args, " "));
    char *bytes = strtok(NULL, " ");
    size_t i;
    int replied = 0;

    cmd_reader_init(&reader);
    for (i = 0; bytes && bytes[i] && bytes[i + 1]; i += 2) {
        char pair[3] = {bytes[i], bytes[i + 1], '\0'};

        if (cmd_reader_push(&reader, (char)hex(pair), max_rate_hz, &reply)) {
            print_reply(&reply);
            replied = 1;
        }
    }
    if (!replied)
        printf("none\n");
}

static void do_wave(char *args)
{
    unsigned long n = hex(strtok(args, " "));
    unsigned long count = hex(strtok(NULL, " "));
    unsigned long i;
    uint8_t k;

    for (i = 0; i < count; i++) {
        for (k = 0; k < WAVE_CHANNELS; k++)
            printf(k ? " %u" : "%u", (unsigned)wave_count((uint32_t)(n + i), k));
        printf("\n");
    }
}

int main(void)
{
    char request[REQUEST_MAX];

    while (fgets(request, sizeof request, stdin)) {
        char *verb;
        char *args;

        request[strcspn(request, "\n")] = '\0';
        verb = request;
        args = strchr(request, ' ');
        if (args)
            *args++ = '\0';
        else
            args = request + strlen(request);
        if (!strcmp(verb, "crc"))
            printf("%04X\n", crc16(args, (uint8_t)strlen(args)));
        else if (!strcmp(verb, "data"))
            do_data(args);
        else if (!strcmp(verb, "header"))
            do_header(args);
        else if (!strcmp(verb, "answer"))
            do_answer(args);
        else if (!strcmp(verb, "command"))
            do_command(args);
        else if (!strcmp(verb, "wave"))
            do_wave(args);
        else
            printf("unknown request\n");
    }
    return 0;
}
