/*
 * upswing_loop.h: a reference control loop for the tables `upswing balance --export` and
 * `upswing swingup RIG --export` write (balance_gains.h and swingup_table.h).
 *
 * It runs the controller upswing verified: the swing-up table's tracking law with a reference-aided rate
 * estimate, the hand-over to the balance loop on the balance cost-to-go (with hysteresis, and after the table's
 * last row in any case), and the balance loop with its Kalman filter, seeded at the hand-over so the estimate does
 * not jump. It also checks the stop conditions the swing-up export carries (UPSWING_STOP_*).
 *
 * SAFETY: this is a reference for a firmware author, not certified code. Its stop checks are a second line only:
 * the stop conditions must also be implemented as a safety function independent of this loop (designed and rated
 * per ISO 13849-1), with an emergency stop per ISO 13850 and a stop category chosen per IEC 60204-1 (0: remove
 * power at once; 1: controlled stop, then remove power). Guard the swept volume (ISO 14120, ISO 13857) and keep
 * the emergency stop within reach. Local codes and licensed practice govern.
 *
 * Build: put this file, upswing_loop.c and the two exported headers on the include path, compile as C99, define
 * UPSWING_LOOP_RATE_CUTOFF_HZ (see upswing_loop.c) and link with -lm. See README.md.
 */
#ifndef UPSWING_LOOP_H
#define UPSWING_LOOP_H

#include "balance_gains.h"
#include "swingup_table.h"

/* Working precision of the loop: float (the tables are float, and so is a microcontroller's FPU). Defining
 * UPSWING_LOOP_REAL=double builds a double-precision variant with the same logic; upswing's test uses it to check
 * the logic apart from float rounding. */
#ifndef UPSWING_LOOP_REAL
#define UPSWING_LOOP_REAL float
#endif
typedef UPSWING_LOOP_REAL upswing_real;

/* Sizes used below (all from the exported headers). */
#define UPSWING_LOOP_N_STATES UPSWING_BALANCE_N_STATES
#define UPSWING_LOOP_N_INPUTS UPSWING_BALANCE_N_INPUTS
#define UPSWING_LOOP_N_MEASURED UPSWING_BALANCE_N_MEASURED
#define UPSWING_LOOP_N_XI UPSWING_BALANCE_KF_N_XI
/* The pending-command buffer needs at least one slot to be a legal C array. */
#define UPSWING_LOOP_N_PENDING (UPSWING_BALANCE_DELAY_SAMPLES * UPSWING_BALANCE_N_INPUTS + 1)

/* What upswing_loop_step did this sample. Values >= UPSWING_LOOP_STOP_FIRST ask for a stop: the command is then
 * zero, and the loop stays stopped (it returns the same status) until upswing_loop_init runs again. */
typedef enum {
    UPSWING_LOOP_TRACKING = 0,           /* the swing-up table's law produced the command */
    UPSWING_LOOP_BALANCING = 1,          /* the balance loop produced the command */
    UPSWING_LOOP_STOP_FIRST = 16,
    UPSWING_LOOP_STOP_CATCH_DEADLINE = 16, /* the cost-to-go had not reached rho_in by the catch deadline */
    UPSWING_LOOP_STOP_SPEED = 17,        /* an estimated joint speed left its window (UPSWING_STOP_SPEED_*) */
    UPSWING_LOOP_STOP_RAIL = 18,         /* the cart left its rail window (UPSWING_STOP_RAIL_M) */
    UPSWING_LOOP_STOP_STALE_READING = 19, /* no fresh reading for UPSWING_STOP_STALE_READING_SAMPLES samples */
    UPSWING_LOOP_STOP_BAD_READING = 20,  /* a reading was not a finite number */
    UPSWING_LOOP_STOP_SEQUENCE = 21,     /* t_index was not the previous one plus one (a sample was lost) */
    UPSWING_LOOP_STOP_SETUP = 22         /* the two headers do not belong together (upswing_loop_init failed) */
} upswing_loop_status;

/* Everything the loop remembers between samples. The caller owns it (static storage or the stack of the task
 * that runs the loop); there are no other globals and no dynamic memory. Treat the fields as private. */
typedef struct {
    int started;       /* 0 until the first reading has been taken */
    int balancing;     /* mode after the previous sample: 0 tracking, 1 balancing */
    int caught;        /* 1 once the cost-to-go has reached rho_in (the catch-deadline check) */
    int stop;          /* 0, or the latched stop status */
    long next_index;   /* the t_index expected next */
    int stale_samples; /* consecutive samples without a fresh reading */
    upswing_real alpha;       /* pole of the rate low-pass, exp(-2 pi f_c / f_s) */
    upswing_real y_prev[UPSWING_LOOP_N_MEASURED];   /* previous reading minus x_eq, angles wrapped [rad or m] */
    upswing_real y_hold[UPSWING_LOOP_N_MEASURED];   /* last fresh raw reading [rad or m] */
    upswing_real rate[UPSWING_LOOP_N_MEASURED];     /* low-passed rate term [rad/s or m/s] (see upswing_loop.c) */
    upswing_real xi[UPSWING_LOOP_N_XI];             /* balance Kalman filter state */
    upswing_real pending[UPSWING_LOOP_N_PENDING];   /* balance commands not yet applied, minus u_eq, oldest first */
    upswing_real x_hat[UPSWING_LOOP_N_STATES];      /* last state estimate (absolute, state order) for logging */
    upswing_real level;                             /* last cost-to-go (x - x_eq)' P (x - x_eq) [-] for logging */
} upswing_loop_state;

/* Reset the loop (before enabling the drive, with the rig at rest at the table's start). Returns 0, or
 * UPSWING_LOOP_STOP_SETUP when the headers do not fit together (different loop rates or state counts); the loop
 * then refuses to run. */
int upswing_loop_init(upswing_loop_state *s);

/* One control period.
 *   t_index  sample number since the swing-up started: 0, 1, 2, ... (row t_index of the table while it lasts)
 *   reading  the encoder readings of this sample, in the measured order of balance_gains.h
 *            (UPSWING_BALANCE_MEASURED_*), absolute, in rad (angles) and m (cart) per docs/conventions.md;
 *            NULL when no fresh reading arrived (the last one is reused, and the stale-reading stop counts)
 *   u_out    UPSWING_LOOP_N_INPUTS commands [N m or N], input order of the headers, saturated at the peaks;
 *            apply them for this period (zero-order hold); zeros when a stop is requested
 * Returns the status of this sample (upswing_loop_status). */
upswing_loop_status upswing_loop_step(upswing_loop_state *s, long t_index, const upswing_real *reading,
                                      upswing_real *u_out);

#endif /* UPSWING_LOOP_H */
