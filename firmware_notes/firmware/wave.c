#include "wave.h"

/* A triangle of period 16 samples, 0 up to 7 and back down to 0, centred by the caller. */
static uint16_t triangle(uint32_t n)
{
    uint8_t t = (uint8_t)(n & 15u);

    return t < 8u ? t : (uint16_t)(15u - t);
}

static uint16_t rail(uint32_t n)
{
    uint16_t phase = (uint16_t)(n & 1023u);

    if (phase >= 512u && phase < 576u)
        return 600u;
    return (uint16_t)(796u + triangle(n));
}

uint16_t wave_count(uint32_t n, uint8_t ch)
{
    switch (ch) {
    case 0:
        return rail(n);
    case 1:
        return (uint16_t)(100u + 150u * ((n >> 8) & 3u));
    case 2:
        return (uint16_t)(n & 1023u);
    default:
        return (uint16_t)(1023u - (n & 1023u));
    }
}
