/* The Linux host port: the portable core as a device on a pseudo-terminal, with a small
 * cart-pendulum model behind port.h, paced in real time by clock_nanosleep, or in lockstep with
 * the host (lockstep=1; PROTOCOL.md section 8.4) so whole sessions run at the host's speed. It
 * declares CAP_SIMULATED: the physics behind the port is a model. The core is the one a board
 * runs, unchanged.
 *
 * Usage: poise-fw-host name=value ...   (the rig's values, e.g. from configs/kestrel-1.toml:
 * device_id, sample_rate_hz, cart_counts_per_m, pendulum_counts_per_rev, track_length_m,
 * switch_inset_m, drive_limit, drive_kind (voltage|force), cart_mass_kg, pendulum_mass_kg,
 * com_distance_m, inertia_com_kgm2, cart_viscous, cart_coulomb_n, pivot_viscous, kt,
 * resistance_ohm, gear_ratio, pulley_radius_m, rotor_inertia_kgm2, dead_band; lockstep 0|1).
 * Prints "firmware rig <id> (<real time|lockstep>, <rate> Hz) ready: connect to <pty path>" on
 * stdout, then runs until SIGINT/SIGTERM. Every latched fault is logged on stderr with its t_us. */
#define _DEFAULT_SOURCE /* cfmakeraw, M_PI on glibc */
#define _XOPEN_SOURCE 600 /* posix_openpt, grantpt, unlockpt, ptsname */
#include <errno.h>
#include <fcntl.h>
#include <math.h>
#include <poll.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <termios.h>
#include <time.h>
#include <unistd.h>

#include "device.h"
#include "plant.h"
#include "port.h"

#define TICK_NS 100000L /* 100 us: the model's step and the core's polling period */
#define LOCKSTEP_GRACE_NS 500000000L /* host silence before lockstep falls back to real time */

static plant rig;
static int pty_fd = -1;
static uint64_t model_ticks; /* TICK_NS steps of the model since power-up: the rig's clock */
static float drive_now;
static double counts_per_m;
static unsigned counts_per_rev;
static volatile sig_atomic_t stopping;
static int lockstep, free_running;
static uint16_t faults_seen;

/* The model's time, not the wall clock's: a board's timer and its physics never disagree, and
 * a sample taken while this process catches up after being descheduled must read the cart where
 * the model has it at that sample's t_us (a wall-clock t_us let a sample see a model that had
 * not yet moved, and the host saw the encoder jump). The loop below keeps it in step with real
 * time whenever the machine lets it. */
uint64_t port_time_us(void) { return model_ticks * (uint64_t)TICK_NS / 1000u; }

int32_t port_cart_counts(void) { return (int32_t)floor(rig.x * counts_per_m + 0.5); }
int32_t port_pendulum_counts(void)
{
    return (int32_t)floor((rig.th - M_PI) * counts_per_rev / (2.0 * M_PI) + 0.5);
}
void port_set_drive(float drive) { drive_now = drive; }
uint8_t port_switches(void)
{
    double trip = rig.p.track_length_m / 2.0 - rig.p.switch_inset_m;
    return (uint8_t)((rig.x <= -trip ? SW_LIMIT_NEG : 0u) | (rig.x >= trip ? SW_LIMIT_POS : 0u) |
                     (rig.end_stop ? SW_END_STOP : 0u));
}
int port_estop_pressed(void) { return 0; }
float port_motor_current_a(void) { return NAN; }
float port_supply_v(void) { return NAN; }
int port_driver_fault(void) { return 0; }

size_t port_serial_read(uint8_t *buf, size_t cap)
{
    ssize_t n = read(pty_fd, buf, cap);
    return n > 0 ? (size_t)n : 0;
}

size_t port_serial_write(const uint8_t *buf, size_t n)
{
    ssize_t w = write(pty_fd, buf, n);
    return w > 0 ? (size_t)w : 0;
}

/* Each fault the core latches, on stderr with the model's t_us and the last time the host fed
 * the watchdog (so a test reads the watchdog's reaction on the firmware's own clock). */
static void log_new_faults(const poise_device *d)
{
    static const struct { uint16_t bit; const char *name; } names[] = {
        {F_WATCHDOG, "F_WATCHDOG"}, {F_DRIVER, "F_DRIVER"}, {F_SUPPLY, "F_SUPPLY"},
        {F_RESET, "F_RESET"}, {F_ESTOP, "F_ESTOP"}};
    uint16_t fresh = (uint16_t)(d->faults & ~faults_seen);
    for (size_t i = 0; i < sizeof names / sizeof names[0]; i++)
        if (fresh & names[i].bit)
            fprintf(stderr, "firmware latched %s at t_us %llu (host last fed the watchdog at t_us "
                            "%llu; drive now %g)\n", names[i].name,
                    (unsigned long long)port_time_us(), (unsigned long long)d->last_feed_us,
                    (double)drive_now);
    faults_seen = d->faults;
}

static void on_signal(int signum) { (void)signum; stopping = 1; }

/* Lockstep (PROTOCOL.md section 8.4): the model stops short of each sample instant until the
 * Drive answering the previous sample has arrived; after LOCKSTEP_GRACE_NS of host silence the
 * port paces in real time (so the watchdog trips in device time) until a Drive comes again. */
static int awaiting_drive(const poise_device *d)
{
    return d->configured && d->sample_seq >= 0 && !d->has_pending && !free_running &&
           port_time_us() + TICK_NS / 1000 >= d->next_sample_us;
}

static long elapsed_ns(const struct timespec *since)
{
    struct timespec now;
    clock_gettime(CLOCK_MONOTONIC, &now);
    return (now.tv_sec - since->tv_sec) * 1000000000L + (now.tv_nsec - since->tv_nsec);
}

/* Read the host's frames (the model's time stands still) until a Drive arrives or the grace
 * period passes; then real-time pacing resumes from now (next). */
static void wait_for_host(poise_device *d, struct timespec *next)
{
    struct timespec since;
    clock_gettime(CLOCK_MONOTONIC, &since);
    while (!stopping && !d->has_pending) {
        struct pollfd readable = {pty_fd, POLLIN, 0};
        long left_ns = LOCKSTEP_GRACE_NS - elapsed_ns(&since);
        if (left_ns <= 0) {
            free_running = 1;
            break;
        }
        poll(&readable, 1, (int)(left_ns / 1000000L) + 1);
        poise_device_step(d);
        log_new_faults(d);
    }
    clock_gettime(CLOCK_MONOTONIC, next);
}

static int set_param(const char *name, const char *value, poise_identity *id, plant_params *p)
{
    char *end;
    double v = strtod(value, &end);
    struct { const char *name; double *field; } numbers[] = {
        {"cart_mass_kg", &p->cart_mass_kg}, {"pendulum_mass_kg", &p->pendulum_mass_kg},
        {"com_distance_m", &p->com_distance_m}, {"inertia_com_kgm2", &p->inertia_com_kgm2},
        {"cart_viscous", &p->cart_viscous}, {"cart_coulomb_n", &p->cart_coulomb_n},
        {"pivot_viscous", &p->pivot_viscous}, {"track_length_m", &p->track_length_m},
        {"switch_inset_m", &p->switch_inset_m}, {"kt", &p->kt},
        {"resistance_ohm", &p->resistance_ohm}, {"gear_ratio", &p->gear_ratio},
        {"pulley_radius_m", &p->pulley_radius_m}, {"rotor_inertia_kgm2", &p->rotor_inertia_kgm2},
        {"dead_band", &p->dead_band}, {"cart_counts_per_m", &counts_per_m},
    };
    if (strcmp(name, "device_id") == 0) {
        if (strlen(value) < 1 || strlen(value) > PW_DEVICE_ID_BYTES)
            return 0;
        strcpy(id->device_id, value);
        return 1;
    }
    if (strcmp(name, "lockstep") == 0) {
        lockstep = strcmp(value, "1") == 0;
        if (lockstep)
            id->capabilities |= CAP_LOCKSTEP;
        return lockstep || strcmp(value, "0") == 0;
    }
    if (strcmp(name, "drive_kind") == 0) {
        p->voltage_drive = strcmp(value, "voltage") == 0;
        id->drive_kind = p->voltage_drive ? 0 : 1;
        return p->voltage_drive || strcmp(value, "force") == 0;
    }
    if (*end != '\0' || end == value)
        return 0;
    if (strcmp(name, "sample_rate_hz") == 0 && v >= 1 && v <= 10000) {
        id->max_sample_rate_hz = (uint16_t)v;
        return 1;
    }
    if (strcmp(name, "pendulum_counts_per_rev") == 0 && v >= 1) {
        counts_per_rev = (unsigned)v;
        return 1;
    }
    if (strcmp(name, "drive_limit") == 0 && v > 0) {
        id->drive_limit = (float)v;
        return 1;
    }
    for (size_t i = 0; i < sizeof numbers / sizeof numbers[0]; i++)
        if (strcmp(name, numbers[i].name) == 0 && v >= 0) {
            *numbers[i].field = v;
            return 1;
        }
    return 0;
}

static int open_pty(void)
{
    struct termios tio;
    int slave;
    pty_fd = posix_openpt(O_RDWR | O_NOCTTY);
    if (pty_fd < 0 || grantpt(pty_fd) || unlockpt(pty_fd))
        return 0;
    /* Raw mode on the slave side, and one slave fd kept open so the master never reads EIO
     * while no host has the port open. */
    slave = open(ptsname(pty_fd), O_RDWR | O_NOCTTY);
    if (slave < 0 || tcgetattr(slave, &tio))
        return 0;
    cfmakeraw(&tio);
    tcsetattr(slave, TCSANOW, &tio);
    return fcntl(pty_fd, F_SETFL, O_NONBLOCK) == 0;
}

int main(int argc, char **argv)
{
    static poise_device dev;
    poise_identity id = {"host-rig", 1, 0, 0, 500, 0, 0, 0, 12.0f, 0,
                         CAP_LIMIT_SWITCHES | CAP_SIMULATED, 0.0f, 0.0f};
    plant_params p = {0};
    struct timespec next;
    p.gravity = 9.81;
    counts_per_m = 40000;
    counts_per_rev = 4096;
    p.gear_ratio = 1;
    p.pulley_radius_m = 0.01;
    p.resistance_ohm = 1;
    for (int i = 1; i < argc; i++) {
        char name[64];
        const char *eq = strchr(argv[i], '=');
        if (!eq || (size_t)(eq - argv[i]) >= sizeof name) {
            fprintf(stderr, "poise-fw-host: argument %d '%s' is not name=value\n", i, argv[i]);
            return 2;
        }
        memcpy(name, argv[i], (size_t)(eq - argv[i]));
        name[eq - argv[i]] = 0;
        if (!set_param(name, eq + 1, &id, &p)) {
            fprintf(stderr, "poise-fw-host: argument %d: bad or unknown %s=%s\n", i, name, eq + 1);
            return 2;
        }
    }
    id.cart_counts_per_m = (float)counts_per_m;
    id.pendulum_counts_per_rev = counts_per_rev;
    id.track_length_m = (float)p.track_length_m;
    if (p.cart_mass_kg <= 0 || p.pendulum_mass_kg <= 0 || p.com_distance_m <= 0 ||
        p.track_length_m <= 0) {
        fprintf(stderr, "poise-fw-host: cart_mass_kg, pendulum_mass_kg, com_distance_m and "
                        "track_length_m must be given and > 0\n");
        return 2;
    }
    if (!open_pty()) {
        fprintf(stderr, "poise-fw-host: cannot open a pseudo-terminal: %s\n", strerror(errno));
        return 1;
    }
    signal(SIGINT, on_signal);
    signal(SIGTERM, on_signal);
    plant_init(&rig, &p);
    clock_gettime(CLOCK_MONOTONIC, &next);
    poise_device_init(&dev, &id);
    faults_seen = dev.faults;
    printf("firmware rig %s (%s, %u Hz) ready: connect to %s\n", id.device_id,
           lockstep ? "lockstep" : "real time", id.max_sample_rate_hz, ptsname(pty_fd));
    fflush(stdout);
    while (!stopping) {
        if (free_running && dev.has_pending)
            free_running = 0; /* the host is back: lockstep again */
        if (lockstep && awaiting_drive(&dev)) {
            wait_for_host(&dev, &next);
            continue;
        }
        if (!lockstep || free_running) {
            next.tv_nsec += TICK_NS;
            if (next.tv_nsec >= 1000000000L) {
                next.tv_nsec -= 1000000000L;
                next.tv_sec++;
            }
            clock_nanosleep(CLOCK_MONOTONIC, TIMER_ABSTIME, &next, NULL);
        }
        plant_step(&rig, drive_now, TICK_NS * 1e-9);
        model_ticks++;
        poise_device_step(&dev);
        log_new_faults(&dev);
    }
    return 0;
}
