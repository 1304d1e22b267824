"""The C building blocks the generated NAME.c starts with (PFX_ is replaced by NAME_).

Float: transposed direct form II biquad (one call per section), steady-state priming,
running-sum moving average; the delta-form biquad for sections with poles near z = 1
(DELTA_HELPERS, modelled operation for operation by filters.float32model: change both
together). Fixed point (LIMIT_/ACC_MAX/UACC filled per Q15/Q31): saturation, the wrap-safe
direct form I biquad, priming by DC gain, exact moving average, gain. Median for both. All
are `static inline`, so unused ones cost nothing and raise no warning. The integer
arithmetic here is what filters.fixedpoint models; change both together.
"""

FLOAT_HELPERS = """\
/* Transposed direct form II biquad; c = b0 b1 b2 a1 a2 dc_gain. */
static inline PFX_sample PFX_tdf2_step(PFX_tdf2 *s, const PFX_sample *c, PFX_sample x)
{
    PFX_sample y = c[0] * x + s->s1;
    s->s1 = c[1] * x - c[3] * y + s->s2;
    s->s2 = c[2] * x - c[4] * y;
    return y;
}

/* Steady state at input u (u = 0: rest): each section as if u had held forever. */
static inline void PFX_cascade_prime(PFX_tdf2 *s, const PFX_sample (*c)[6], unsigned n,
                                     PFX_sample u)
{
    unsigned i;
    for (i = 0; i < n; i++) {
        PFX_sample y = c[i][5] * u;
        s[i].s2 = c[i][2] * u - c[i][4] * y;
        s[i].s1 = c[i][1] * u - c[i][3] * y + s[i].s2;
        u = y;
    }
}

/* Running sum over a circular buffer; `fresh` sums the current lap and replaces the
 * running sum at each wrap, so rounding never accumulates beyond one window. */
static inline PFX_sample PFX_mavg_step(PFX_sample *buf, uint32_t n, uint32_t *pos, PFX_sample *sum,
                                PFX_sample *fresh, PFX_sample inv_n, PFX_sample x)
{
    PFX_sample old = buf[*pos];
    buf[*pos] = x;
    *sum += x - old;
    *fresh += x;
    if (++*pos == n) {
        *pos = 0;
        *sum = *fresh;
        *fresh = 0;
    }
    return *sum * inv_n;
}

static inline void PFX_mavg_prime(PFX_sample *buf, uint32_t n, uint32_t *pos, PFX_sample *sum,
                           PFX_sample *fresh, PFX_sample u)
{
    uint32_t i;
    for (i = 0; i < n; i++)
        buf[i] = u;
    *pos = 0;
    *sum = u * (PFX_sample)n;
    *fresh = 0;
}
"""

DELTA_HELPERS = """\
/* Delta-form biquad: transposed direct form II in the delayed accumulator z^-1/(1 - z^-1),
 * c = b0, 2b0+b1, b0+b1+b2, 2+a1, 1+a1+a2, dc_gain (the coefficients as offsets from their
 * values at z = 1, which float holds finely even when the poles crowd z = 1). Each state
 * adds its increment by Kahan's compensated sum (e1, e2 keep what the addition lost), so
 * small increments are never rounded away. Needs strict IEEE arithmetic: no -ffast-math. */
static inline PFX_sample PFX_delta_step(PFX_delta *s, const PFX_sample *c, PFX_sample x)
{
    PFX_sample y = c[0] * x + s->s1;
    PFX_sample d1 = c[1] * x - c[3] * y + s->s2;
    PFX_sample d2 = c[2] * x - c[4] * y;
    PFX_sample t, u;
    t = d1 - s->e1;
    u = s->s1 + t;
    s->e1 = (u - s->s1) - t;
    s->s1 = u;
    t = d2 - s->e2;
    u = s->s2 + t;
    s->e2 = (u - s->s2) - t;
    s->s2 = u;
    return y;
}

/* Steady state at input u (u = 0: rest): y = dc_gain u and the states that make the next
 * increments zero. */
static inline void PFX_delta_prime(PFX_delta *s, const PFX_sample (*c)[6], unsigned n,
                                   PFX_sample u)
{
    unsigned i;
    for (i = 0; i < n; i++) {
        PFX_sample y = c[i][5] * u;
        s[i].s1 = y - c[i][0] * u;
        s[i].s2 = c[i][3] * y - c[i][1] * u;
        s[i].e1 = 0;
        s[i].e2 = 0;
        u = y;
    }
}
"""

FIXED_HELPERS = """\
typedef UACC PFX_uacc;

/* Coefficients of one direct form I section in Q(F - shift), rshift = F - shift. */
typedef struct {
    PFX_sample b0, b1, b2, a1, a2, dc;
    unsigned char rshift, dc_rshift;
} PFX_df1_coef;

static inline PFX_sample PFX_sat(PFX_acc v)
{
    return (PFX_sample)(v > LIMIT_MAX ? LIMIT_MAX : v < LIMIT_MIN ? LIMIT_MIN : v);
}

/* Two's complement value of a wrapped unsigned sum (no implementation-defined cast). */
static inline PFX_acc PFX_signed(PFX_uacc u)
{
    return u <= (PFX_uacc)ACC_MAX ? (PFX_acc)u : -(PFX_acc)(~u) - 1;
}

/* Direct form I: acc = round + b0 x + b1 x1 + b2 x2 - a1 y1 - a2 y2, summed modulo 2^N in
 * unsigned arithmetic (wrap-around in between is harmless when the result fits), then an
 * arithmetic right shift (round half up) and saturation. */
static inline PFX_sample PFX_df1_step(PFX_df1 *s, const PFX_df1_coef *c, PFX_sample x)
{
    PFX_uacc acc = (PFX_uacc)1 << (c->rshift - 1);
    PFX_sample y;
    acc += (PFX_uacc)((PFX_acc)c->b0 * x);
    acc += (PFX_uacc)((PFX_acc)c->b1 * s->x1);
    acc += (PFX_uacc)((PFX_acc)c->b2 * s->x2);
    acc -= (PFX_uacc)((PFX_acc)c->a1 * s->y1);
    acc -= (PFX_uacc)((PFX_acc)c->a2 * s->y2);
    y = PFX_sat(PFX_signed(acc) >> c->rshift);
    s->x2 = s->x1;
    s->x1 = x;
    s->y2 = s->y1;
    s->y1 = y;
    return y;
}

/* Steady state at input u (u = 0: rest): y = u * dc_gain, rounded. */
static inline void PFX_cascade_prime(PFX_df1 *s, const PFX_df1_coef *c, unsigned n, PFX_sample u)
{
    unsigned i;
    for (i = 0; i < n; i++) {
        PFX_acc p = (PFX_acc)u * c[i].dc + ((PFX_acc)1 << (c[i].dc_rshift - 1));
        PFX_sample y = PFX_sat(p >> c[i].dc_rshift);
        s[i].x1 = s[i].x2 = u;
        s[i].y1 = s[i].y2 = y;
        u = y;
    }
}

/* num / den rounded half away from zero (den > 0). */
static inline PFX_acc PFX_div_round(PFX_acc num, PFX_acc den)
{
    return num >= 0 ? (num + den / 2) / den : -((-num + den / 2) / den);
}

/* Exact running sum over a circular buffer. */
static inline PFX_sample PFX_mavg_step(PFX_sample *buf, uint32_t n, uint32_t *pos, PFX_acc *sum,
                                PFX_sample x)
{
    *sum += (PFX_acc)x - buf[*pos];
    buf[*pos] = x;
    if (++*pos == n)
        *pos = 0;
    return PFX_sat(PFX_div_round(*sum, (PFX_acc)n));
}

static inline void PFX_mavg_prime(PFX_sample *buf, uint32_t n, uint32_t *pos, PFX_acc *sum,
                           PFX_sample u)
{
    uint32_t i;
    for (i = 0; i < n; i++)
        buf[i] = u;
    *pos = 0;
    *sum = (PFX_acc)u * (PFX_acc)n;
}

/* y = round(x * scale >> rshift) + offset, saturated. */
static inline PFX_sample PFX_gain(PFX_sample x, PFX_sample scale, unsigned rshift,
                                  PFX_sample offset)
{
    PFX_acc p = ((PFX_acc)x * scale + ((PFX_acc)1 << (rshift - 1))) >> rshift;
    return PFX_sat(p + offset);
}
"""

MEDIAN_HELPERS = """\
/* Running median: `hist` holds the window in arrival order, `sorted` the same values in
 * order; each sample replaces the oldest by one insertion pass. */
static inline PFX_sample PFX_median_step(PFX_sample *hist, PFX_sample *sorted, uint32_t n,
                                  uint32_t *pos, PFX_sample x)
{
    PFX_sample old = hist[*pos];
    uint32_t i = 0;
    hist[*pos] = x;
    if (++*pos == n)
        *pos = 0;
    while (i + 1 < n && sorted[i] != old)
        i++;
    if (x > old) {
        while (i + 1 < n && sorted[i + 1] < x) {
            sorted[i] = sorted[i + 1];
            i++;
        }
    } else {
        while (i > 0 && sorted[i - 1] > x) {
            sorted[i] = sorted[i - 1];
            i--;
        }
    }
    sorted[i] = x;
    return sorted[n / 2];
}

static inline void PFX_median_prime(PFX_sample *hist, PFX_sample *sorted, uint32_t n,
                             uint32_t *pos, PFX_sample u)
{
    uint32_t i;
    for (i = 0; i < n; i++)
        hist[i] = sorted[i] = u;
    *pos = 0;
}
"""
