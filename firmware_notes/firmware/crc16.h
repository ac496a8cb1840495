/* CRC-16/IBM-3740 (also called CRC-16/CCITT-FALSE): the CRC of every line on the wire (PROTOCOL.md, section 2).
 * Plain C99 with no AVR dependency, so the host compiler can build it for tests. */
#ifndef RAILTAP_CRC16_H
#define RAILTAP_CRC16_H

#include <stdint.h>

#define CRC16_INIT 0xFFFFu

/* Feed one byte into a running CRC; start from CRC16_INIT. */
uint16_t crc16_byte(uint16_t crc, uint8_t b);

/* CRC of len bytes, from CRC16_INIT. */
uint16_t crc16(const char *data, uint8_t len);

#endif
