/* Reset and the vector table: what runs before main.
 *
 * The Cortex-M4 fetches the initial stack pointer from word 0 of the vector table and the reset
 * handler's address from word 1 (PM0214 section 2.3.4; the table sits at the start of flash,
 * 0x0800 0000, aliased at 0 when booting from flash: RM0368 section 2.4). The IRQ positions are
 * those of RM0368 section 10.1.3, Table 38. */
#include <stdint.h>

#include "inputs.h"
#include "motor.h"
#include "serial.h"
#include "stm32f401.h"

typedef void (*handler)(void);

/* From the linker script (stm32f401cc.ld). */
extern uint32_t _sidata[], _sdata[], _edata[], _sbss[], _ebss[], _estack[];

int main(void);
void reset_handler(void);

/* Every fault and every interrupt nobody enabled: the motor off at once, then wait for the
 * independent watchdog to reset the chip (the host then sees F_RESET). */
static void halt_handler(void)
{
    motor_off();
    for (;;) {
    }
}

void reset_handler(void)
{
    /* The FPU first: the C code below and after is compiled for hard float. */
    CPACR |= CPACR_CP10_CP11_FULL;
    __asm__ volatile("dsb\n\tisb" ::: "memory"); /* PM0214 section 4.6.6 */
    /* GCC may turn these two loops into memcpy and memset calls: newlib's need neither .data
     * nor .bss, so that is safe here. */
    for (uint32_t *src = _sidata, *dst = _sdata; dst < _edata;)
        *dst++ = *src++;
    for (uint32_t *dst = _sbss; dst < _ebss;)
        *dst++ = 0;
    main();
    halt_handler();
}

#define H halt_handler
#define SERIAL serial_isr
#define EXTI inputs_exti_isr

__attribute__((section(".vectors"), used)) static const struct {
    uint32_t *initial_sp;
    handler exceptions[15];
    handler irqs[IRQ_COUNT];
} vector_table = {
    _estack,
    /* Reset, NMI, HardFault, MemManage, BusFault, UsageFault, 4 reserved, SVCall, DebugMonitor,
     * reserved, PendSV, SysTick */
    {reset_handler, H, H, H, H, H, 0, 0, 0, 0, H, H, 0, H, H},
    {
        H, H, H, H, H, H, EXTI, EXTI, EXTI, EXTI,  /*  0..9:  EXTI0..3 at 6..9 */
        EXTI, H, H, H, H, H, H, H, H, H,           /* 10..19: EXTI4 at 10 */
        H, H, H, EXTI, H, H, H, H, H, H,           /* 20..29: EXTI9_5 at 23 */
        H, H, H, H, H, H, H, SERIAL, SERIAL, H,    /* 30..39: USART1 37, USART2 38 */
        EXTI, H, H, H, H, H, H, H, H, H,           /* 40..49: EXTI15_10 at 40 */
        H, H, H, H, H, H, H, H, H, H,              /* 50..59 */
        H, H, H, H, H, H, H, H, H, H,              /* 60..69 */
        H, SERIAL, H, H, H, H, H, H, H, H,         /* 70..79: USART6 at 71 */
        H, H, H, H, H,                             /* 80..84 */
    },
};
