#include "uart.h"

#include "config.h"

#include <avr/interrupt.h>
#include <avr/io.h>
#include <util/setbaud.h>

/* 256 bytes and 8-bit indices: the indices wrap by themselves, no masking and no division. It holds
 * six 4-channel data lines, so the main loop can format the next line while this one goes out. */
static volatile char tx_buf[256];
static volatile uint8_t tx_head;
static volatile uint8_t tx_tail;

/* Commands are at most 24 bytes and the host sends one at a time; 64 bytes leave slack for a burst. */
#define RX_SIZE 64u
static volatile char rx_buf[RX_SIZE];
static volatile uint8_t rx_head;
static volatile uint8_t rx_tail;

void uart_init(void)
{
    UBRR0H = UBRRH_VALUE;
    UBRR0L = UBRRL_VALUE;
#if USE_2X
    UCSR0A = _BV(U2X0);
#else
    UCSR0A = 0;
#endif
    UCSR0C = _BV(UCSZ01) | _BV(UCSZ00); /* 8 data bits, no parity, 1 stop bit */
    UCSR0B = _BV(RXEN0) | _BV(TXEN0) | _BV(RXCIE0);
}

uint8_t uart_tx_free(void)
{
    uint8_t used;

    /* tx_tail moves in the interrupt; one 8-bit read of it is atomic. */
    used = (uint8_t)(tx_head - tx_tail);
    return (uint8_t)(255u - used);
}

void uart_write(const char *data, uint8_t n)
{
    while (n--)
        tx_buf[tx_head++] = *data++;
    UCSR0B |= _BV(UDRIE0); /* the data-register-empty interrupt sends it */
}

ISR(USART_UDRE_vect)
{
    if (tx_tail == tx_head) {
        UCSR0B &= (uint8_t)~_BV(UDRIE0); /* nothing left: stop asking */
        return;
    }
    UDR0 = tx_buf[tx_tail++];
}

ISR(USART_RX_vect)
{
    char c = (char)UDR0;
    uint8_t next = (uint8_t)((rx_head + 1u) % RX_SIZE);

    /* A full buffer drops the byte; the command it belonged to then fails its CRC and is answered
     * "A err crc", so the host knows to send it again. */
    if (next != rx_tail) {
        rx_buf[rx_head] = c;
        rx_head = next;
    }
}

int16_t uart_read(void)
{
    char c;

    if (rx_tail == rx_head)
        return -1;
    c = rx_buf[rx_tail];
    rx_tail = (uint8_t)((rx_tail + 1u) % RX_SIZE);
    return (uint8_t)c;
}
