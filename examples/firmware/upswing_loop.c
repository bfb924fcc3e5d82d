/*
 * upswing_loop.c: reference implementation of the swing-up, hand-over and balance loop that upswing verifies
 * (CatchController of upswing's verification, run with the tracked swing-up table and the balance Kalman filter).
 *
 * SAFETY: a reference, not certified code. The stop checks here are a second line: implement the stop conditions
 * (UPSWING_STOP_* of swingup_table.h) also as a safety function of the drive that does not depend on this loop
 * (ISO 13849-1), provide an emergency stop (ISO 13850) and choose the stop category per IEC 60204-1. Test with
 * reduced peaks first, the swept volume guarded (ISO 14120, ISO 13857). Local codes and licensed practice govern.
 *
 * What one sample does (upswing_loop_step), and why:
 *   1. Reading: y = reading - x_eq (measured entries), angles wrapped to (-pi, pi]. A missing reading (NULL)
 *      reuses the last one, as upswing's drop-out study does, and counts towards the stale-reading stop.
 *   2. Rates: the encoders give positions only. While the table runs (t_index < UPSWING_SWINGUP_ROWS) the rate is
 *      reference-aided: the reference's own rate of row k plus a first-order low-pass of the differenced tracking
 *      error (y - y_ref[k]). The reference carries the fast motion without lag; only the small error is filtered,
 *      so the filter can be slow enough to quieten encoder steps. After the table, the same filter acts on the
 *      differenced readings (its state carries over unchanged, as in the verified controller).
 *   3. Hand-over: level = (x_hat - x_eq)' P (x_hat - x_eq), angle errors wrapped. Balance engages when
 *      level <= UPSWING_HANDOVER_RHO_IN, releases only above UPSWING_HANDOVER_RHO_OUT (hysteresis: a level
 *      between the two keeps the mode), and engages for good after the table's last row. While balancing, x_hat
 *      is the balance Kalman filter's estimate, not the filtered differences of step 2: near upright those are
 *      noisy enough to carry the level across the whole band from one sample to the next, and the two
 *      controllers would alternate (upswing measured ~200 changes in 0.9 s on its demo acrobot).
 *   4. Stop checks on the estimate (UPSWING_STOP_*): catch deadline, speed windows, rail window, stale reading.
 *   5. Command: tracking u = u_ff[k] - K[k] (x_hat - x_ref[k]), angle errors wrapped; or the balance loop
 *      u = u_eq - K_discrete [x_hat_b, pending] with the Kalman filter's x_hat_b. Saturated at the peaks.
 *      When balance engages, its filter is seeded so that its estimate equals the swing-up's x_hat (bumpless
 *      transfer): a filter linearized about upright that ran through the swing, fed commands it did not make,
 *      would hand over a wrong estimate. Pending (delayed) balance commands start at zero, as in the verification.
 *
 * Arithmetic in upswing_real (float unless UPSWING_LOOP_REAL says otherwise; the tables are float). The only
 * library calls are exp() once at init, floor() in the angle wrap and isfinite() on the readings (link with -lm).
 */
#define UPSWING_SWINGUP_TABLE_DEFINE /* this file holds the swing-up table's definitions (see swingup_table.h) */
#include "upswing_loop.h"

#include <math.h>
#include <stddef.h>

/* The rate filter's cut-off: the swing-up header's UPSWING_SWINGUP_RATE_CUTOFF_HZ ([swingup].tracking_rate_cutoff
 * of the rig file, "rate_estimate" in swingup.json). Defining UPSWING_LOOP_RATE_CUTOFF_HZ overrides it, but a
 * different value is a different controller from the one verified. Headers exported before the macro existed
 * carry the value only in their "rates:" comment line: then the define is required. */
#ifndef UPSWING_LOOP_RATE_CUTOFF_HZ
#ifdef UPSWING_SWINGUP_RATE_CUTOFF_HZ
#define UPSWING_LOOP_RATE_CUTOFF_HZ UPSWING_SWINGUP_RATE_CUTOFF_HZ
#else
#error "define UPSWING_LOOP_RATE_CUTOFF_HZ [Hz]: the rate cut-off in the 'rates:' line of swingup_table.h"
#endif
#endif

#ifndef UPSWING_HANDOVER_RHO_IN
#error "swingup_table.h carries no hand-over rule: export it from a verified swing-up (upswing swingup RIG --export)"
#endif

#if UPSWING_SWINGUP_STATES != UPSWING_BALANCE_N_STATES || UPSWING_SWINGUP_INPUTS != UPSWING_BALANCE_N_INPUTS
#error "swingup_table.h and balance_gains.h were exported for different rigs (state or input counts differ)"
#endif

/* The encoders read the positions q; the state is [q, q_dot]. The rate of measured entry j is state j + P. */
#if UPSWING_BALANCE_N_STATES != 2 * UPSWING_BALANCE_N_MEASURED
#error "this loop expects the encoders to read every position coordinate (states = 2 x measured)"
#endif

#define N UPSWING_LOOP_N_STATES
#define M UPSWING_LOOP_N_INPUTS
#define P UPSWING_LOOP_N_MEASURED
#define NXI UPSWING_LOOP_N_XI
#define D UPSWING_BALANCE_DELAY_SAMPLES
#define PI_R ((upswing_real)3.14159265358979323846)
#define TWO_PI_R ((upswing_real)6.28318530717958647692)

/* Wrap an angle to (-pi, pi]: a + 2 pi floor((pi - a) / (2 pi)), which is pi - mod(pi - a, 2 pi) (the convention
 * of docs/conventions.md) written so that an angle already in range comes back unchanged: the form with pi - ...
 * would round a small difference to the spacing of floats near pi (2.4e-7 rad), which the rate estimate then
 * multiplies by the sample rate. */
static upswing_real wrap(upswing_real a)
{
    return a + TWO_PI_R * (upswing_real)floor((PI_R - a) / TWO_PI_R);
}

/* 1 where measured entry j is an angle (every measured entry but the cart position). */
static int measured_is_angle(int j)
{
#ifdef UPSWING_BALANCE_MEASURED_X
    return j != UPSWING_BALANCE_MEASURED_X;
#else
    (void)j;
    return 1;
#endif
}

/* State i is an angle when it is a measured angle (positions come first in the state order). */
static int state_is_angle(int i)
{
    return i < P && measured_is_angle(i);
}

static upswing_real absf(upswing_real v)
{
    return v < 0.0f ? -v : v;
}

static upswing_real clampf(upswing_real v, upswing_real limit)
{
    return v > limit ? limit : (v < -limit ? -limit : v);
}

/* Solve A z = b in place (A n x n, row-major, overwritten) by Gaussian elimination with partial pivoting.
 * Returns 0, or -1 when A is singular to working precision. */
static int solve(upswing_real *A, upswing_real *b, int n)
{
    int i, j, k;
    for (k = 0; k < n; ++k) {
        int piv = k;
        for (i = k + 1; i < n; ++i) {
            if (absf(A[i * n + k]) > absf(A[piv * n + k])) {
                piv = i;
            }
        }
        if (A[piv * n + k] == 0.0f) {
            return -1;
        }
        if (piv != k) {
            for (j = 0; j < n; ++j) {
                upswing_real t = A[k * n + j];
                A[k * n + j] = A[piv * n + j];
                A[piv * n + j] = t;
            }
            {
                upswing_real t = b[k];
                b[k] = b[piv];
                b[piv] = t;
            }
        }
        for (i = k + 1; i < n; ++i) {
            upswing_real f = A[i * n + k] / A[k * n + k];
            for (j = k; j < n; ++j) {
                A[i * n + j] -= f * A[k * n + j];
            }
            b[i] -= f * b[k];
        }
    }
    for (k = n - 1; k >= 0; --k) {
        upswing_real acc = b[k];
        for (j = k + 1; j < n; ++j) {
            acc -= A[k * n + j] * b[j];
        }
        b[k] = acc / A[k * n + k];
    }
    return 0;
}

/* Bumpless transfer: the filter state xi with Cxi xi = x_hat - x_eq - Dy y (the balance estimate then equals the
 * swing-up's x_hat). Square Cxi (the Kalman filter): solved directly. Otherwise the least-squares solution from
 * the normal equations Cxi' Cxi xi = Cxi' r, which is the pseudo-inverse's answer when Cxi has full column rank. */
static int seed_filter(upswing_loop_state *s, const upswing_real *y)
{
    upswing_real r[N];
    upswing_real A[NXI * NXI];
    upswing_real b[NXI];
    int i, j, l;
    for (i = 0; i < N; ++i) {
        upswing_real acc = s->x_hat[i] - upswing_balance_x_eq[i];
        for (j = 0; j < P; ++j) {
            acc -= upswing_balance_kf_Dy[i][j] * y[j];
        }
        r[i] = acc;
    }
    if (NXI == N) {
        for (i = 0; i < N; ++i) {
            b[i] = r[i];
            for (j = 0; j < NXI; ++j) {
                A[i * NXI + j] = upswing_balance_kf_Cxi[i][j];
            }
        }
    } else {
        for (i = 0; i < NXI; ++i) {
            b[i] = 0.0f;
            for (l = 0; l < N; ++l) {
                b[i] += upswing_balance_kf_Cxi[l][i] * r[l];
            }
            for (j = 0; j < NXI; ++j) {
                upswing_real acc = 0.0f;
                for (l = 0; l < N; ++l) {
                    acc += upswing_balance_kf_Cxi[l][i] * upswing_balance_kf_Cxi[l][j];
                }
                A[i * NXI + j] = acc;
            }
        }
    }
    if (solve(A, b, NXI) != 0) {
        return -1;
    }
    for (i = 0; i < NXI; ++i) {
        s->xi[i] = b[i];
    }
    for (i = 0; i < UPSWING_LOOP_N_PENDING; ++i) {
        s->pending[i] = 0.0f;
    }
    return 0;
}

/* The balance loop of balance_gains.h, as deviations from x_eq and u_eq:
 *   x_hat_b = Cxi xi + Dy y
 *   u       = u_eq - K_discrete [x_hat_b, pending], saturated at the peaks
 *   xi     <- F xi + G y + H (u_applied - u_eq)   (u_applied: the command reaching the actuator this period,
 *                                                  i.e. the oldest pending one when DELAY_SAMPLES > 0)
 * The filter hears the command after the output clamp, as it reaches the motor. (The verified engine clamps the
 * deviation u - u_eq at the peak instead; the two agree because u_eq = 0 at the upright equilibrium.) */
static void balance_step(upswing_loop_state *s, const upswing_real *y, upswing_real *u_out)
{
    upswing_real xb[N];
    upswing_real du[M];
    upswing_real applied[M];
    upswing_real next[NXI];
    int i, j;
    for (i = 0; i < N; ++i) {
        upswing_real acc = 0.0f;
        for (j = 0; j < NXI; ++j) {
            acc += upswing_balance_kf_Cxi[i][j] * s->xi[j];
        }
        for (j = 0; j < P; ++j) {
            acc += upswing_balance_kf_Dy[i][j] * y[j];
        }
        xb[i] = acc;
    }
    for (i = 0; i < M; ++i) {
        upswing_real acc = 0.0f;
        for (j = 0; j < N; ++j) {
            acc += upswing_balance_K_discrete[i][j] * xb[j];
        }
        for (j = 0; j < D * M; ++j) {
            acc += upswing_balance_K_discrete[i][N + j] * s->pending[j];
        }
        u_out[i] = clampf(upswing_balance_u_eq[i] - acc, upswing_balance_u_peak[i]);
        du[i] = u_out[i] - upswing_balance_u_eq[i];
        applied[i] = D > 0 ? s->pending[i] : du[i];
    }
    for (i = 0; i < NXI; ++i) {
        upswing_real acc = 0.0f;
        for (j = 0; j < NXI; ++j) {
            acc += upswing_balance_kf_F[i][j] * s->xi[j];
        }
        for (j = 0; j < P; ++j) {
            acc += upswing_balance_kf_G[i][j] * y[j];
        }
        for (j = 0; j < M; ++j) {
            acc += upswing_balance_kf_H[i][j] * applied[j];
        }
        next[i] = acc;
    }
    for (i = 0; i < NXI; ++i) {
        s->xi[i] = next[i];
    }
    /* shift the pending commands: drop the oldest, append this one */
    for (i = 0; i + M < D * M; ++i) {
        s->pending[i] = s->pending[i + M];
    }
    for (i = 0; D > 0 && i < M; ++i) {
        s->pending[(D - 1) * M + i] = du[i];
    }
}

/* The swing-up table's law for row k: u = u_ff[k] - K[k] (x_hat - x_ref[k]), angle errors wrapped, saturated. */
static void tracking_step(const upswing_loop_state *s, long k, upswing_real *u_out)
{
    upswing_real e[N];
    int i, j;
    for (j = 0; j < N; ++j) {
        e[j] = s->x_hat[j] - upswing_swingup_x_ref[k][j];
        if (state_is_angle(j)) {
            e[j] = wrap(e[j]);
        }
    }
    for (i = 0; i < M; ++i) {
        upswing_real acc = upswing_swingup_u_ff[k][i];
        for (j = 0; j < N; ++j) {
            acc -= upswing_swingup_K[k][i][j] * e[j];
        }
        u_out[i] = clampf(acc, upswing_swingup_peak[i]);
    }
}

static upswing_real handover_level(const upswing_real *x_hat)
{
    upswing_real e[N];
    upswing_real v = 0.0f;
    int i, j;
    for (i = 0; i < N; ++i) {
        e[i] = x_hat[i] - upswing_handover_x_eq[i];
        if (state_is_angle(i)) {
            e[i] = wrap(e[i]);
        }
    }
    for (i = 0; i < N; ++i) {
        upswing_real row = 0.0f;
        for (j = 0; j < N; ++j) {
            row += upswing_handover_P[i][j] * e[j];
        }
        v += e[i] * row;
    }
    return v;
}

/* Stop conditions of swingup_table.h (0 when none applies). Speeds use the estimated rates (the drive's own safety
 * function should use its own speed measurement); the rail window uses the cart's reading. */
static int stop_reason(const upswing_loop_state *s, long t_index)
{
    (void)s;
    (void)t_index;
#ifdef UPSWING_STOP_CATCH_DEADLINE_S
    if (!s->caught && (upswing_real)t_index / UPSWING_SWINGUP_SAMPLE_RATE_HZ > UPSWING_STOP_CATCH_DEADLINE_S) {
        return UPSWING_LOOP_STOP_CATCH_DEADLINE;
    }
#endif
#ifdef UPSWING_STOP_SPEED_CART
    if (absf(s->x_hat[UPSWING_BALANCE_STATE_X_DOT]) > UPSWING_STOP_SPEED_CART) {
        return UPSWING_LOOP_STOP_SPEED;
    }
#endif
#ifdef UPSWING_STOP_SPEED_SHOULDER
    if (absf(s->x_hat[UPSWING_BALANCE_STATE_THETA1_DOT]) > UPSWING_STOP_SPEED_SHOULDER) {
        return UPSWING_LOOP_STOP_SPEED;
    }
#endif
#ifdef UPSWING_STOP_SPEED_ELBOW
    if (absf(s->x_hat[UPSWING_BALANCE_STATE_THETA2_DOT]) > UPSWING_STOP_SPEED_ELBOW) {
        return UPSWING_LOOP_STOP_SPEED;
    }
#endif
#ifdef UPSWING_STOP_RAIL_M
    if (absf(s->y_hold[UPSWING_BALANCE_MEASURED_X]) > UPSWING_STOP_RAIL_M) { /* the reading, not an estimate */
        return UPSWING_LOOP_STOP_RAIL;
    }
#endif
#ifdef UPSWING_STOP_STALE_READING_SAMPLES
    if (s->stale_samples >= UPSWING_STOP_STALE_READING_SAMPLES) {
        return UPSWING_LOOP_STOP_STALE_READING;
    }
#endif
    return 0;
}

int upswing_loop_init(upswing_loop_state *s)
{
    int i;
    s->started = 0;
    s->balancing = 0;
    s->caught = 0;
    s->stop = 0;
    s->next_index = 0;
    s->stale_samples = 0;
    s->level = 0.0f;
    for (i = 0; i < P; ++i) {
        s->y_prev[i] = 0.0f;
        s->y_hold[i] = 0.0f;
        s->rate[i] = 0.0f;
    }
    for (i = 0; i < NXI; ++i) {
        s->xi[i] = 0.0f;
    }
    for (i = 0; i < UPSWING_LOOP_N_PENDING; ++i) {
        s->pending[i] = 0.0f;
    }
    for (i = 0; i < N; ++i) {
        s->x_hat[i] = 0.0f;
    }
    /* Both tables must run at one loop rate: the filter, the gains and the table rows all assume it. */
    if (UPSWING_SWINGUP_SAMPLE_RATE_HZ != UPSWING_BALANCE_SAMPLE_RATE_HZ) {
        s->stop = UPSWING_LOOP_STOP_SETUP;
        return UPSWING_LOOP_STOP_SETUP;
    }
    s->alpha = (upswing_real)exp(-2.0 * 3.14159265358979323846 * (double)UPSWING_LOOP_RATE_CUTOFF_HZ
                          / (double)UPSWING_SWINGUP_SAMPLE_RATE_HZ);
    return 0;
}

static upswing_loop_status stop_now(upswing_loop_state *s, int reason, upswing_real *u_out)
{
    int i;
    if (!s->stop) {
        s->stop = reason;
    }
    for (i = 0; i < M; ++i) {
        u_out[i] = 0.0f;
    }
    return (upswing_loop_status)s->stop;
}

upswing_loop_status upswing_loop_step(upswing_loop_state *s, long t_index, const upswing_real *reading,
                                      upswing_real *u_out)
{
    upswing_real y[P];
    int i, reason, before, now;
    const long rows = UPSWING_SWINGUP_ROWS;

    if (s->stop) {
        return stop_now(s, s->stop, u_out);
    }
    if (t_index != s->next_index) {
        return stop_now(s, UPSWING_LOOP_STOP_SEQUENCE, u_out);
    }
    s->next_index = t_index + 1;

    /* 1. reading */
    if (reading == NULL) {
        if (!s->started) {
            return stop_now(s, UPSWING_LOOP_STOP_STALE_READING, u_out);
        }
        s->stale_samples += 1;
    } else {
        for (i = 0; i < P; ++i) {
            if (!isfinite(reading[i])) {
                return stop_now(s, UPSWING_LOOP_STOP_BAD_READING, u_out);
            }
            s->y_hold[i] = reading[i];
        }
        s->stale_samples = 0;
    }
    for (i = 0; i < P; ++i) {
        y[i] = s->y_hold[i] - upswing_balance_x_eq[i];
        if (measured_is_angle(i)) {
            y[i] = wrap(y[i]);
        }
    }
    if (!s->started) { /* the first sample has nothing to difference against: zero rate error */
        for (i = 0; i < P; ++i) {
            s->y_prev[i] = y[i];
            s->rate[i] = 0.0f;
        }
        s->started = 1;
    }

    /* 2. state estimate x_hat (absolute): positions from the reading, rates from the filter */
    for (i = 0; i < P; ++i) {
        upswing_real d = y[i] - s->y_prev[i];
        upswing_real ref_rate = 0.0f;
        if (t_index < rows) {
            long k = t_index;
            long k_prev = k > 0 ? k - 1 : 0;
            /* the reference's step, in working precision (a float difference of two rows would round) */
            d -= (upswing_real)upswing_swingup_x_ref[k][i] - (upswing_real)upswing_swingup_x_ref[k_prev][i];
            ref_rate = upswing_swingup_x_ref[k][P + i];
        }
        if (measured_is_angle(i)) {
            d = wrap(d);
        }
        s->rate[i] = s->alpha * s->rate[i] + (1.0f - s->alpha) * d * UPSWING_SWINGUP_SAMPLE_RATE_HZ;
        s->x_hat[i] = y[i] + upswing_balance_x_eq[i];
        s->x_hat[P + i] = s->rate[i] + ref_rate + upswing_balance_x_eq[P + i];
        s->y_prev[i] = y[i];
    }

    /* 3. hand-over rule; while balancing it reads the balance filter's estimate x_hat_b = Cxi xi + Dy y (plus
     * x_eq), from the filter state of this sample, before the filter's update in balance_step */
    if (s->balancing) {
        int j;
        for (i = 0; i < N; ++i) {
            upswing_real acc = upswing_balance_x_eq[i];
            for (j = 0; j < NXI; ++j) {
                acc += upswing_balance_kf_Cxi[i][j] * s->xi[j];
            }
            for (j = 0; j < P; ++j) {
                acc += upswing_balance_kf_Dy[i][j] * y[j];
            }
            s->x_hat[i] = acc;
        }
    }
    s->level = handover_level(s->x_hat);
    if (s->level <= UPSWING_HANDOVER_RHO_IN) {
        s->caught = 1;
    }
    before = s->balancing;
    now = before ? (s->level <= UPSWING_HANDOVER_RHO_OUT) : (s->level <= UPSWING_HANDOVER_RHO_IN);
    if (t_index >= rows) {
        now = 1;
    }

    /* 4. stop conditions */
    reason = stop_reason(s, t_index);
    if (reason) {
        return stop_now(s, reason, u_out);
    }

    /* 5. command */
    if (now && !before && seed_filter(s, y) != 0) {
        return stop_now(s, UPSWING_LOOP_STOP_SETUP, u_out);
    }
    s->balancing = now;
    if (now) {
        balance_step(s, y, u_out);
        return UPSWING_LOOP_BALANCING;
    }
    tracking_step(s, t_index < rows ? t_index : rows - 1, u_out);
    return UPSWING_LOOP_TRACKING;
}
