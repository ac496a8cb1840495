/* USART0 at BAUD, 8N1, interrupt-driven both ways, so formatting the next line overlaps sending this one. */
#ifndef RAILTAP_UART_H
#define RAILTAP_UART_H

#include <stdint.h>

void uart_init(void);

/* Bytes that uart_write can take now. */
uint8_t uart_tx_free(void);

/* Queue n bytes (the caller checked uart_tx_free first, so a line is never split by a full buffer). */
void uart_write(const char *data, uint8_t n);

/* The next received byte, or -1 if none has come. */
int16_t uart_read(void);

#endif
