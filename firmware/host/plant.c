#define _DEFAULT_SOURCE /* M_PI on glibc */
#include "plant.h"

#include <math.h>

void plant_init(plant *pl, const plant_params *p)
{
    pl->p = *p;
    pl->x = pl->v = pl->w = 0.0;
    pl->th = M_PI; /* hanging at rest at the track centre */
    pl->end_stop = 0;
}

/* Force at rest per unit effective command, and the back-EMF's viscous coefficient. */
static void drive_gains(const plant_params *p, double *gain, double *b_emf)
{
    if (!p->voltage_drive) {
        *gain = 1.0;
        *b_emf = 0.0;
        return;
    }
    *gain = p->kt * p->gear_ratio / (p->resistance_ohm * p->pulley_radius_m);
    *b_emf = p->kt * p->kt * p->gear_ratio * p->gear_ratio /
             (p->resistance_ohm * p->pulley_radius_m * p->pulley_radius_m);
}

static void accel(const plant_params *p, double f_rest, double b, double v, double th, double w,
                  double *a, double *alpha)
{
    double ml = p->pendulum_mass_kg * p->com_distance_m, s = sin(th), c = cos(th);
    double jp = p->inertia_com_kgm2 + ml * p->com_distance_m;
    double mt = p->cart_mass_kg + p->pendulum_mass_kg +
                p->rotor_inertia_kgm2 * p->gear_ratio * p->gear_ratio /
                    (p->pulley_radius_m * p->pulley_radius_m);
    double q_th = ml * p->gravity * s - p->pivot_viscous * w, cent = ml * s * w * w, q_x;
    if (v > 0.0)
        q_x = f_rest - b * v - p->cart_coulomb_n;
    else if (v < 0.0)
        q_x = f_rest - b * v + p->cart_coulomb_n;
    else {
        double alpha_stuck = q_th / jp, hold = f_rest + ml * c * alpha_stuck - cent;
        if (fabs(hold) <= p->cart_coulomb_n) {
            *a = 0.0;
            *alpha = alpha_stuck;
            return;
        }
        q_x = hold > 0.0 ? f_rest - p->cart_coulomb_n : f_rest + p->cart_coulomb_n;
    }
    double mlc = ml * c, rhs = q_x - cent, det = mt * jp - mlc * mlc;
    *a = (jp * rhs + mlc * q_th) / det;
    *alpha = (mlc * rhs + mt * q_th) / det;
}

/* Stop the cart at once, as an end stop does: an impulse on the cart alone, so the pendulum keeps
 * its angular momentum about the pivot, J w - m l cos(th) v (sim_device/plant.py does the same). */
static void stop_cart(plant *pl)
{
    const plant_params *p = &pl->p;
    double ml = p->pendulum_mass_kg * p->com_distance_m;
    double jp = p->inertia_com_kgm2 + ml * p->com_distance_m;
    pl->w -= ml / jp * cos(pl->th) * pl->v;
    pl->v = 0.0;
}

void plant_step(plant *pl, double u, double h)
{
    const plant_params *p = &pl->p;
    double gain, b_emf, eff = 0.0, half = p->track_length_m / 2.0;
    double a1, l1, a2, l2, a3, l3, a4, l4, v0 = pl->v;
    drive_gains(p, &gain, &b_emf);
    if (fabs(u) > p->dead_band)
        eff = u > 0 ? u - p->dead_band : u + p->dead_band;
    double f = gain * eff, b = p->cart_viscous + b_emf;
    double x = pl->x, v = pl->v, th = pl->th, w = pl->w;
    accel(p, f, b, v, th, w, &a1, &l1);
    accel(p, f, b, v + h / 2 * a1, th + h / 2 * w, w + h / 2 * l1, &a2, &l2);
    accel(p, f, b, v + h / 2 * a2, th + h / 2 * (w + h / 2 * l1), w + h / 2 * l2, &a3, &l3);
    accel(p, f, b, v + h * a3, th + h * (w + h / 2 * l2), w + h * l3, &a4, &l4);
    pl->x = x + h * (v + h / 6 * (a1 + a2 + a3));
    pl->v = v + h / 6 * (a1 + 2 * a2 + 2 * a3 + a4);
    pl->th = th + h * (w + h / 6 * (l1 + l2 + l3));
    pl->w = w + h / 6 * (l1 + 2 * l2 + 2 * l3 + l4);
    int reversed = p->cart_coulomb_n > 0.0 && ((v0 > 0.0 && pl->v < 0.0) || (v0 < 0.0 && pl->v > 0.0));
    pl->end_stop = fabs(pl->x) >= half;
    if (fabs(pl->x) > half)
        pl->x = pl->x > 0 ? half : -half;
    /* friction reversed the cart within the step (the stick test decides the next one), or it
     * runs into an end stop: stop it */
    if (reversed || (pl->end_stop && pl->v != 0.0 && (pl->v > 0.0) == (pl->x > 0.0)))
        stop_cart(pl);
}
