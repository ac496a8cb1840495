/* Runs the board build of the firmware (its real ADC code) in simavr, a cycle-counting ATmega328P simulator,
 * with known millivolts on the ADC pins, and writes what the UART sends to stdout.
 *
 *   simavr_tap FIRMWARE.elf SECONDS RAIL_MV [START_MS LENGTH_MS LEVEL_MV]...
 *
 * A0 holds RAIL_MV except during each dip, when it holds LEVEL_MV from START_MS for LENGTH_MS (times since
 * reset, on the simulated clock). A1, A2 and A3 hold 1000, 2500 and 4000 mV, so the scan's channel switching
 * is checked too. Everything runs on simulated time: the same arguments give the same bytes on any machine.
 * The test feeds the bytes to railtap and checks that it finds each dip with the right depth and length. */
#include <sim_avr.h>
#include <sim_elf.h>
#include <avr_adc.h>
#include <avr_uart.h>
#include <sim_irq.h>

#include <stdarg.h>
#include <stdio.h>
#include <stdlib.h>

#define MAX_DIPS 8
#define F_CPU_HZ 16000000UL
#define SUPPLY_MV 5000u

struct dip {
    double start_s;
    double end_s;
    uint32_t level_mv;
};

static const uint32_t FIXED_MV[3] = {1000u, 2500u, 4000u};

static avr_t *avr;
static uint32_t rail_mv;
static struct dip dips[MAX_DIPS];
static int n_dips;

static uint32_t a0_mv(double t_s)
{
    int i;

    for (i = 0; i < n_dips; i++)
        if (t_s >= dips[i].start_s && t_s < dips[i].end_s)
            return dips[i].level_mv;
    return rail_mv;
}

/* simavr raises this when the firmware starts a conversion; the pin voltages are set just then, from the
 * simulated time, and the conversion reads them. */
static void on_conversion(struct avr_irq_t *irq, uint32_t value, void *param)
{
    double t_s = (double)avr->cycle / (double)F_CPU_HZ;
    int k;

    (void)irq;
    (void)value;
    (void)param;
    avr_raise_irq(avr_io_getirq(avr, AVR_IOCTL_ADC_GETIRQ, ADC_IRQ_ADC0), a0_mv(t_s));
    for (k = 0; k < 3; k++)
        avr_raise_irq(avr_io_getirq(avr, AVR_IOCTL_ADC_GETIRQ, ADC_IRQ_ADC1 + k), FIXED_MV[k]);
}

static void on_uart_byte(struct avr_irq_t *irq, uint32_t value, void *param)
{
    (void)irq;
    (void)param;
    putchar((int)(value & 0xFFu));
}

/* simavr logs to stdout by default; stdout is for the UART's bytes alone, so its messages go to stderr. */
static void log_to_stderr(avr_t *from, const int level, const char *format, va_list ap)
{
    (void)from;
    if (level <= LOG_WARNING)
        vfprintf(stderr, format, ap);
}

/* No echo of the UART's lines, and no sleeping while the firmware polls. */
static void quiet_uart(void)
{
    uint32_t flags = 0;

    avr_ioctl(avr, AVR_IOCTL_UART_GET_FLAGS('0'), &flags);
    flags &= ~(uint32_t)(AVR_UART_FLAG_STDIO | AVR_UART_FLAG_POLL_SLEEP);
    avr_ioctl(avr, AVR_IOCTL_UART_SET_FLAGS('0'), &flags);
}

static int parse_args(int argc, char **argv, double *seconds)
{
    int i;

    if (argc < 4 || (argc - 4) % 3 != 0 || (argc - 4) / 3 > MAX_DIPS)
        return 0;
    *seconds = atof(argv[2]);
    rail_mv = (uint32_t)atol(argv[3]);
    for (i = 4; i < argc; i += 3) {
        dips[n_dips].start_s = atof(argv[i]) / 1000.0;
        dips[n_dips].end_s = dips[n_dips].start_s + atof(argv[i + 1]) / 1000.0;
        dips[n_dips].level_mv = (uint32_t)atol(argv[i + 2]);
        n_dips++;
    }
    return 1;
}

int main(int argc, char **argv)
{
    elf_firmware_t firmware = {0};
    double seconds;
    avr_cycle_count_t end;
    int state = cpu_Running;

    if (!parse_args(argc, argv, &seconds)) {
        fprintf(stderr, "usage: %s FIRMWARE.elf SECONDS RAIL_MV [START_MS LENGTH_MS LEVEL_MV]...\n", argv[0]);
        return 2;
    }
    avr_global_logger_set(log_to_stderr);
    if (elf_read_firmware(argv[1], &firmware) != 0) {
        fprintf(stderr, "%s: cannot read firmware\n", argv[1]);
        return 1;
    }
    avr = avr_make_mcu_by_name("atmega328p");
    if (!avr || avr_init(avr) != 0) {
        fprintf(stderr, "simavr has no atmega328p\n");
        return 1;
    }
    firmware.frequency = F_CPU_HZ;
    avr_load_firmware(avr, &firmware);
    avr->vcc = avr->avcc = avr->aref = SUPPLY_MV;
    quiet_uart();
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_ADC_GETIRQ, ADC_IRQ_OUT_TRIGGER), on_conversion, NULL);
    avr_irq_register_notify(avr_io_getirq(avr, AVR_IOCTL_UART_GETIRQ('0'), UART_IRQ_OUTPUT), on_uart_byte, NULL);
    end = (avr_cycle_count_t)(seconds * (double)F_CPU_HZ);
    while (avr->cycle < end && state != cpu_Done && state != cpu_Crashed)
        state = avr_run(avr);
    fflush(stdout);
    avr_terminate(avr);
    return state == cpu_Crashed ? 1 : 0;
}
