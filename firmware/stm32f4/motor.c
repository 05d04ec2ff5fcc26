/* PWM mode 1, edge-aligned, counting up (RM0368 section 13.3.9 for TIM2 to TIM5; sections 12.3
 * and 14.3 for TIM1 and TIM9 to TIM11): the output is high while the counter is below CCRx, so
 * CCRx = duty * period. The compare value is preloaded and takes effect at the next period
 * boundary (at most 50 us at 20 kHz), so a duty change never cuts a pulse short. */
#include "motor.h"

#include <stdint.h>

#include "board.h"
#include "clock.h"
#include "hw.h"
#include "port.h"
#include "stm32f401.h"

#define PWM_PERIOD (CPU_HZ / BOARD_MOTOR_PWM_HZ) /* timer ticks a period, 4200 as shipped */

static uint32_t pwm_timer;

void motor_init(void)
{
    uint32_t shift = TIM_CCMR_SHIFT(BOARD_MOTOR_CHANNEL);
    pwm_timer = timer_enable(BOARD_MOTOR_TIM);
    pin_setup(BOARD_MOTOR_DIR, GPIO_MODE_OUTPUT, GPIO_PULL_NONE, 0); /* low: ODR resets to 0 */
    TIM_PSC(pwm_timer) = 0;
    TIM_ARR(pwm_timer) = PWM_PERIOD - 1u;
    TIM_CCR(pwm_timer, BOARD_MOTOR_CHANNEL) = 0;
    TIM_CCMR(pwm_timer, BOARD_MOTOR_CHANNEL) |= (TIM_CCMR_OC_PWM1 | TIM_CCMR_OC_PRELOAD) << shift;
    TIM_CCER(pwm_timer) |= TIM_CCER_CCE(BOARD_MOTOR_CHANNEL);
    if (BOARD_MOTOR_TIM == 1)
        TIM_BDTR(pwm_timer) |= TIM_BDTR_MOE; /* the advanced timer's outputs are off without it */
    TIM_EGR(pwm_timer) = TIM_EGR_UG;         /* load the preloaded values now */
    TIM_CR1(pwm_timer) = TIM_CR1_ARPE | TIM_CR1_CEN;
    pin_setup(BOARD_MOTOR_PWM, GPIO_MODE_AF, GPIO_PULL_NONE, BOARD_MOTOR_PWM_AF);
}

/* Volts to duty: |drive| / BOARD_SUPPLY_V, at most 1 (the core has already clamped the drive to
 * +-drive_limit and replaced NaN by 0); the sign sets the direction pin. */
void port_set_drive(float drive)
{
    float toward_plus_x = drive * (float)BOARD_MOTOR_SIGN;
    float duty = (toward_plus_x < 0.0f ? -toward_plus_x : toward_plus_x) / BOARD_SUPPLY_V;
    uint32_t compare = duty >= 1.0f ? PWM_PERIOD : (uint32_t)(duty * (float)PWM_PERIOD + 0.5f);
    pin_write(BOARD_MOTOR_DIR, toward_plus_x > 0.0f);
    TIM_CCR(pwm_timer, BOARD_MOTOR_CHANNEL) = compare;
}

void motor_off(void)
{
    pin_write(BOARD_MOTOR_PWM, 0);
    pin_setup(BOARD_MOTOR_PWM, GPIO_MODE_OUTPUT, GPIO_PULL_NONE, 0);
}
