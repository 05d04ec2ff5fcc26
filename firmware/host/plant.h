/* A small cart-pendulum model for the Linux host port (the same equations as
 * sim_device/plant.py: Lagrange, RK4; DC motor through a belt or a force amplifier).
 * The core never sees this: it reads encoder counts and writes a drive through port.h. */
#ifndef POISE_HOST_PLANT_H
#define POISE_HOST_PLANT_H

typedef struct {
    double cart_mass_kg, pendulum_mass_kg, com_distance_m, inertia_com_kgm2;
    double cart_viscous, cart_coulomb_n, pivot_viscous, gravity;
    double track_length_m, switch_inset_m;
    int voltage_drive; /* 1: DC motor in volts; 0: force in newtons */
    double kt, resistance_ohm, gear_ratio, pulley_radius_m, rotor_inertia_kgm2, dead_band;
} plant_params;

typedef struct {
    plant_params p;
    double x, v, th, w; /* th = 0 upright, pi hanging, counter-clockwise positive */
    int end_stop;       /* touched a hard end stop in the last step */
} plant;

void plant_init(plant *pl, const plant_params *p);
/* Advance dt_s seconds with drive u (volts or newtons, already clamped by the core). */
void plant_step(plant *pl, double u, double dt_s);

#endif
