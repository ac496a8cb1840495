#include "crc16.h"

/* Bitwise, without a table: 512 bytes of table would be a quarter of the ATmega328P's RAM (or need PROGMEM
 * reads), and at about 8 shifts per byte a 41-byte data line costs a few thousand cycles, well inside a
 * sample period. */
uint16_t crc16_byte(uint16_t crc, uint8_t b)
{
    uint8_t i;

    crc ^= (uint16_t)b << 8;
    for (i = 0; i < 8; i++)
        crc = (crc & 0x8000u) ? (uint16_t)((crc << 1) ^ 0x1021u) : (uint16_t)(crc << 1);
    return crc;
}

uint16_t crc16(const char *data, uint8_t len)
{
    uint16_t crc = CRC16_INIT;

    while (len--)
        crc = crc16_byte(crc, (uint8_t)*data++);
    return crc;
}
