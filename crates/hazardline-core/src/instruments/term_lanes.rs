//! The Newton steps' leg terms, four intervals at a time.
//!
//! Every Newton step of the bootstrap (and of the quote conversions' flat solves, which are
//! one-segment bootstraps) evaluates the same intervals of one contract with a new hazard:
//! [`crate::instruments::cds::evaluate_terms`] over dual numbers, interval after interval, each
//! with a division and a branch between the series form and the closed form. A
//! [`TermLayout`] lists a node's intervals once, when the bootstrap's plan is built (point
//! indices, each interval's ln DF difference, length and lead, each coupon's premium factor).
//! At each step [`TermLayout::evaluate`] takes four intervals at a time: it gathers P Q and
//! ln Q at their ends, computes the four terms on the lanes of AVX2 registers (the form the
//! scalar code takes when all four take the same one, which is most groups; otherwise both,
//! keeping per lane the one the scalar code takes), and adds them to the sums one after the
//! other in the order the scalar code adds them, so that the additions of one group of four
//! overlap with the arithmetic of the next.
//!
//! The numbers are the scalar code's, bit for bit: each lane carries out the same IEEE
//! operations in the same order as `protection_term` and `accrual_term` over `Dual` (no fused
//! multiply-adds; a vector add, multiply or divide rounds each lane as the scalar instruction
//! does), and the sums are the same additions in the same order. The unit tests compare the
//! two on random grids and hazards, bit for bit. Where the CPU lacks AVX2 (or off x86-64) the
//! terms are computed one interval at a time by the scalar functions themselves.

use super::cds::{accrual_term_spans, protection_term, CouponTerm, LegPlan, SERIES_THRESHOLD};
use crate::math::{Dual, Scalar};

/// The intervals a node's Newton steps evaluate: the protection intervals between consecutive
/// points of the node's contract from its cut on, and the accrual-on-default intervals of its
/// paid coupons from their cut on, as `evaluate_terms` walks them.
#[derive(Debug, Clone, Default)]
pub(crate) struct TermLayout {
    /// The intervals' two points: the protection intervals, then the accrual-on-default
    /// intervals of every paid coupon (coupon after coupon, path order), each part padded to a
    /// multiple of four with points 0 and 0 (lanes computed and never added).
    points: Vec<[u32; 2]>,
    /// ln P(t0) - ln P(t1) of the protection intervals; then of the accrual intervals, their
    /// t1 - t0 and their t0 - t_s; each part padded like `points` with zeros.
    consts: Vec<f64>,
    /// Per paid coupon: its survival point, accrual x P(pay)/P(pay - 1 day), and where its
    /// intervals end among the accrual intervals.
    coupons: Vec<(u32, f64, u32)>,
    /// The numbers of protection and accrual intervals (before the padding).
    n_prot: usize,
    n_aod: usize,
}

/// `n` rounded up to a multiple of four.
fn padded(n: usize) -> usize {
    n.div_ceil(4) * 4
}

/// Which code computes: four lanes where the CPU has AVX2, or one value at a time (the tests
/// run both).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Lanes {
    Detect,
    #[cfg_attr(not(test), allow(dead_code))]
    Scalar,
}

impl TermLayout {
    /// Lays out the protection intervals between the consecutive points of `prot` and the
    /// accrual-on-default intervals of the paid coupons of `coupons`.
    pub(crate) fn new(plan: &LegPlan, prot: &[u32], coupons: &[CouponTerm]) -> TermLayout {
        let paid = || coupons.iter().filter(|c| c.paid);
        let n_prot = prot.len().saturating_sub(1);
        let n_aod: usize = paid().map(|c| (c.aod_to - c.aod_from).saturating_sub(1) as usize).sum();
        let (np, na) = (padded(n_prot), padded(n_aod));
        let mut l = TermLayout {
            points: vec![[0, 0]; np + na],
            consts: vec![0.0; np + 3 * na],
            coupons: Vec::with_capacity(paid().count()),
            n_prot,
            n_aod,
        };
        let ldf = |i0: usize, i1: usize| plan.log_dfs[i0] - plan.log_dfs[i1];
        for (k, w) in prot.windows(2).enumerate() {
            l.points[k] = [w[0], w[1]];
            l.consts[k] = ldf(w[0] as usize, w[1] as usize);
        }
        let mut k = 0;
        for c in paid() {
            for w in plan.aod_path[c.aod_from as usize..c.aod_to as usize].windows(2) {
                let (i0, i1) = (w[0] as usize, w[1] as usize);
                l.points[np + k] = [w[0], w[1]];
                l.consts[np + k] = ldf(i0, i1);
                let (t0, t1) = (plan.times[i0], plan.times[i1]);
                l.consts[np + na + k] = t1 - t0;
                l.consts[np + 2 * na + k] = t0 - c.t_s;
                k += 1;
            }
            l.coupons.push((c.q_idx, c.accrual * c.pay_df_ratio, k as u32));
        }
        l
    }

    /// The parts of `points` and `consts`, padding included.
    fn prot_i(&self) -> &[[u32; 2]] {
        &self.points[..padded(self.n_prot)]
    }
    fn aod_i(&self) -> &[[u32; 2]] {
        &self.points[padded(self.n_prot)..]
    }
    fn prot_f(&self) -> &[f64] {
        &self.consts[..padded(self.n_prot)]
    }
    fn aod_consts(&self, part: usize) -> &[f64] {
        let (np, na) = (padded(self.n_prot), padded(self.n_aod));
        &self.consts[np + part * na..np + (part + 1) * na]
    }
    fn aod_f(&self) -> &[f64] {
        self.aod_consts(0)
    }
    fn aod_dt(&self) -> &[f64] {
        self.aod_consts(1)
    }
    fn aod_lead(&self) -> &[f64] {
        self.aod_consts(2)
    }

    /// Protection (without 1 - R), premium01 and accrual-on-default01 of the laid-out
    /// intervals with P Q and ln Q per grid point: the same bits as `evaluate_terms` over the
    /// `prot` and `coupons` the layout was made from. `aod` is scratch for the accrual terms.
    pub(crate) fn evaluate(&self, pq: &[Dual], log_q: &[Dual], aod: &mut Vec<Dual>) -> (Dual, Dual, Dual) {
        self.evaluate_by(pq, log_q, aod, Lanes::Detect)
    }

    fn evaluate_by(&self, pq: &[Dual], log_q: &[Dual], aod: &mut Vec<Dual>, lanes: Lanes) -> (Dual, Dual, Dual) {
        if aod.len() < self.aod_i().len() {
            aod.resize(self.aod_i().len(), Dual::constant(0.0));
        }
        let aod = &mut aod[..self.aod_i().len()];
        #[cfg(target_arch = "x86_64")]
        let prot = if lanes == Lanes::Detect && std::arch::is_x86_feature_detected!("avx2") {
            // SAFETY: the CPU has the feature the function is compiled for.
            unsafe { self.terms_avx2(pq, log_q, aod) }
        } else {
            self.terms_scalar(pq, log_q, aod)
        };
        #[cfg(not(target_arch = "x86_64"))]
        let prot = {
            let _ = lanes;
            self.terms_scalar(pq, log_q, aod)
        };
        // The coupons' sums, in the scalar code's order.
        let (mut prem, mut aod_sum) = (Dual::constant(0.0), Dual::constant(0.0));
        let mut from = 0usize;
        for &(q, m, end) in &self.coupons {
            prem = prem + pq[q as usize] * m;
            let mut acc = Dual::constant(0.0);
            for &t in &aod[from..end as usize] {
                acc = acc + t;
            }
            aod_sum = aod_sum + acc * CouponTerm::ACCRUAL_FACTOR;
            from = end as usize;
        }
        (prot, prem, aod_sum)
    }

    /// One interval at a time, by the scalar functions: returns the protection sum and writes
    /// the accrual terms to `aod`.
    fn terms_scalar(&self, pq: &[Dual], log_q: &[Dual], aod: &mut [Dual]) -> Dual {
        let mut prot = Dual::constant(0.0);
        for (&[i0, i1], &f) in self.prot_i()[..self.n_prot].iter().zip(self.prot_f()) {
            let (i0, i1) = (i0 as usize, i1 as usize);
            prot = prot + protection_term(pq[i0], pq[i1], f, log_q[i0] - log_q[i1]);
        }
        for (k, &[i0, i1]) in self.aod_i()[..self.n_aod].iter().enumerate() {
            let (i0, i1) = (i0 as usize, i1 as usize);
            let h = log_q[i0] - log_q[i1];
            aod[k] = accrual_term_spans(pq[i0], pq[i1], self.aod_f()[k], h, self.aod_dt()[k], self.aod_lead()[k]);
        }
        prot
    }

    /// Four intervals at a time on AVX2 lanes: returns the protection sum and writes the
    /// accrual terms to `aod` (of the padded length).
    ///
    /// The lanes hold the four intervals in the order 0, 2, 1, 3 (what unpacking two registers
    /// of two `Dual`s each gives); the constants are permuted to match when loaded, and the
    /// terms come back to 0, 1, 2, 3 when unpacked into `Dual`s.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    unsafe fn terms_avx2(&self, pq: &[Dual], log_q: &[Dual], aod: &mut [Dual]) -> Dual {
        use std::arch::x86_64::*;
        let (add, sub, mul, div) = (_mm256_add_pd, _mm256_sub_pd, _mm256_mul_pd, _mm256_div_pd);
        let c = _mm256_set1_pd;
        let (threshold, one, half) = (c(SERIES_THRESHOLD), c(1.0), c(0.5));
        // (value, derivative) of the duals of `xs` at four points, lanes in the order 0, 2, 1, 3
        // (a macro rather than a closure, so that it is always inlined).
        macro_rules! gather {
            ($xs:expr, $idx:expr) => {{
                let (xs, idx): (&[Dual], [usize; 4]) = ($xs, $idx);
                let lane = |i: usize| _mm_loadu_pd(std::ptr::addr_of!(xs[i]).cast::<f64>());
                let lo = _mm256_set_m128d(lane(idx[1]), lane(idx[0]));
                let hi = _mm256_set_m128d(lane(idx[3]), lane(idx[2]));
                (_mm256_unpacklo_pd(lo, hi), _mm256_unpackhi_pd(lo, hi))
            }};
        }
        // Four constants from `k` on, in the lanes' order.
        let constants = |xs: &[f64], k: usize| -> __m256d {
            let v = _mm256_loadu_pd(xs[k..k + 4].as_ptr());
            _mm256_permute4x64_pd::<0b11_01_10_00>(v)
        };
        // The inputs of four intervals from `k` on: P Q at both ends, and h = ln Q(t0) -
        // ln Q(t1).
        macro_rules! inputs {
            ($list:expr, $k:expr) => {{
                let (list, k): (&[[u32; 2]], usize) = ($list, $k);
                let e = &list[k..k + 4];
                let i0 = [e[0][0] as usize, e[1][0] as usize, e[2][0] as usize, e[3][0] as usize];
                let i1 = [e[0][1] as usize, e[1][1] as usize, e[2][1] as usize, e[3][1] as usize];
                let (a0v, a0d) = gather!(pq, i0);
                let (a1v, a1d) = gather!(pq, i1);
                let (l0v, l0d) = gather!(log_q, i0);
                let (l1v, l1d) = gather!(log_q, i1);
                (a0v, a0d, a1v, a1d, sub(l0v, l1v), sub(l0d, l1d))
            }};
        }
        // Dual * Dual: (a.v b.v, a.d b.v + a.v b.d).
        let dmul = |av: __m256d, ad: __m256d, bv: __m256d, bd: __m256d| (mul(av, bv), add(mul(ad, bv), mul(av, bd)));
        // Dual / x given 1 / x.v: (a.v inv, (a.d - q x.d) inv).
        let ddiv = |av: __m256d, ad: __m256d, inv: __m256d, xd: __m256d| {
            let q = mul(av, inv);
            (q, mul(sub(ad, mul(q, xd)), inv))
        };
        // The four terms back as Duals in the intervals' order.
        let unpack = |tv: __m256d, td: __m256d| -> [__m128d; 4] {
            let (a, b) = (_mm256_unpacklo_pd(tv, td), _mm256_unpackhi_pd(tv, td));
            [
                _mm256_castpd256_pd128(a),
                _mm256_extractf128_pd::<1>(a),
                _mm256_castpd256_pd128(b),
                _mm256_extractf128_pd::<1>(b),
            ]
        };

        // The terms of a group: the one form all its real intervals take, or both blended lane
        // by lane (see `form`).
        macro_rules! by_form {
            ($series:expr, $left:expr, $series_form:expr, $closed_form:expr) => {{
                let series: __m256d = $series;
                match form(series, $left) {
                    Form::Closed => $closed_form(),
                    Form::Series => $series_form(),
                    Form::Both => {
                        let (s, l) = ($series_form(), $closed_form());
                        (_mm256_blendv_pd(l.0, s.0, series), _mm256_blendv_pd(l.1, s.1, series))
                    }
                }
            }};
        }

        let mut prot = _mm_setzero_pd();
        let n = self.n_prot;
        let mut k = 0;
        while k < n {
            let (a0v, a0d, a1v, a1d, hv, hd) = inputs!(self.prot_i(), k);
            let f = constants(self.prot_f(), k);
            // x = h + f (a Dual plus an f64: the derivative is h's).
            let (xv, xd) = (add(hv, f), hd);
            let series = _mm256_cmp_pd::<_CMP_LT_OQ>(xv, threshold);
            // Series: a0 h ((((x/120 - 1/24) x + 1/6) x - 1/2) x + 1).
            let series_form = || {
                let p2 = (sub(mul(xv, c(1.0 / 120.0)), c(1.0 / 24.0)), mul(xd, c(1.0 / 120.0)));
                let p3 = dmul(p2.0, p2.1, xv, xd);
                let p5 = dmul(add(p3.0, c(1.0 / 6.0)), p3.1, xv, xd);
                let p7 = dmul(sub(p5.0, half), p5.1, xv, xd);
                let ah = dmul(a0v, a0d, hv, hd);
                dmul(ah.0, ah.1, add(p7.0, one), p7.1)
            };
            // Closed form: h / x (a0 - a1).
            let closed_form = || {
                let hx = ddiv(hv, hd, div(one, xv), xd);
                dmul(hx.0, hx.1, sub(a0v, a1v), sub(a0d, a1d))
            };
            let (tv, td) = by_form!(series, n - k, series_form, closed_form);
            let terms = unpack(tv, td);
            // (v, d) + (v, d): the Dual addition, lane by lane.
            for t in &terms[..(n - k).min(4)] {
                prot = _mm_add_pd(prot, *t);
            }
            k += 4;
        }

        let n = self.n_aod;
        let mut k = 0;
        while k < n {
            let (a0v, a0d, a1v, a1d, hv, hd) = inputs!(self.aod_i(), k);
            let (f, dt, lead) =
                (constants(self.aod_f(), k), constants(self.aod_dt(), k), constants(self.aod_lead(), k));
            let (xv, xd) = (add(hv, f), hd);
            let series = _mm256_cmp_pd::<_CMP_LT_OQ>(xv, threshold);
            // Series: h a0 (s1 lead + s2 dt).
            let series_form = || {
                let q1 = (mul(xv, c(-1.0 / 24.0)), mul(xd, c(-1.0 / 24.0)));
                let q3 = dmul(add(q1.0, c(1.0 / 6.0)), q1.1, xv, xd);
                let q5 = dmul(sub(q3.0, half), q3.1, xv, xd);
                let s1 = (add(q5.0, one), q5.1);
                let r1 = (mul(xv, c(-1.0 / 30.0)), mul(xd, c(-1.0 / 30.0)));
                let r3 = dmul(add(r1.0, c(1.0 / 8.0)), r1.1, xv, xd);
                let r5 = dmul(sub(r3.0, c(1.0 / 3.0)), r3.1, xv, xd);
                let s2 = (add(r5.0, half), r5.1);
                let ha = dmul(hv, hd, a0v, a0d);
                let m = (add(mul(s1.0, lead), mul(s2.0, dt)), add(mul(s1.1, lead), mul(s2.1, dt)));
                dmul(ha.0, ha.1, m.0, m.1)
            };
            // Closed form: h / x ((diff / x - a1) dt + diff lead), diff = a0 - a1.
            let closed_form = || {
                let inv = div(one, xv);
                let diff = (sub(a0v, a1v), sub(a0d, a1d));
                let q = ddiv(diff.0, diff.1, inv, xd);
                let q2 = (sub(q.0, a1v), sub(q.1, a1d));
                let q5 = (add(mul(q2.0, dt), mul(diff.0, lead)), add(mul(q2.1, dt), mul(diff.1, lead)));
                let hx = ddiv(hv, hd, inv, xd);
                dmul(hx.0, hx.1, q5.0, q5.1)
            };
            let (tv, td) = by_form!(series, n - k, series_form, closed_form);
            // Intervals k, k + 1 then k + 2, k + 3 as (value, derivative) pairs.
            let out = aod[k..k + 4].as_mut_ptr().cast::<f64>();
            _mm256_storeu_pd(out, _mm256_unpacklo_pd(tv, td));
            _mm256_storeu_pd(out.add(4), _mm256_unpackhi_pd(tv, td));
            k += 4;
        }
        let mut pair = [0.0; 2];
        _mm_storeu_pd(pair.as_mut_ptr(), prot);
        Dual::new(pair[0], pair[1])
    }
}

/// Which of the two forms a group of four intervals needs.
#[cfg(target_arch = "x86_64")]
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Form {
    /// Every interval of the group takes the closed form.
    Closed,
    /// Every interval takes the series form.
    Series,
    /// Some take one, some the other: both are computed and blended lane by lane.
    Both,
}

/// The forms the `left` intervals of a group still to be added need (`left` of four or more:
/// all four lanes), from the comparison mask `series` (lanes in the order 0, 2, 1, 3). The
/// padding lanes past the last interval are never added, so they do not count: a group whose
/// real intervals all take one form computes that form alone, and each lane's numbers are the
/// ones the blend would have picked.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn form(series: std::arch::x86_64::__m256d, left: usize) -> Form {
    // The mask's bit of interval i: lanes hold intervals 0, 2, 1, 3.
    const REAL: [i32; 5] = [0b0000, 0b0001, 0b0101, 0b0111, 0b1111];
    let real = REAL[left.min(4)];
    let bits = std::arch::x86_64::_mm256_movemask_pd(series) & real;
    if bits == 0 {
        Form::Closed
    } else if bits == real {
        Form::Series
    } else {
        Form::Both
    }
}

/// ln Q and P Q, each with its derivative in the hazard, at the grid points `range` of a
/// segment that starts at `t_prev` with ln Q = `l_prev` and has hazard `lambda`: ln Q =
/// l_prev - lambda (t - t_prev), d ln Q = -(t - t_prev), P Q = exp(ln Q + ln P) and d P Q =
/// P Q d ln Q, written to `dl` and `dpq` (`args` is scratch for the exponentials' arguments).
/// Four points at a time where the CPU has AVX2 and `how` is [`Lanes::Detect`], with the same
/// operations per point as one at a time.
#[allow(clippy::too_many_arguments)]
pub(crate) fn segment_points(
    times: &[f64],
    log_dfs: &[f64],
    range: std::ops::Range<usize>,
    (t_prev, l_prev, lambda): (f64, f64, f64),
    dl: &mut [Dual],
    dpq: &mut [Dual],
    args: &mut Vec<f64>,
    how: Lanes,
) {
    let n = range.len();
    args.clear();
    args.resize(n, 0.0);
    let (times, log_dfs) = (&times[range.clone()], &log_dfs[range.clone()]);
    let (dl, dpq) = (&mut dl[range.clone()], &mut dpq[range]);
    #[cfg(target_arch = "x86_64")]
    let lanes = how == Lanes::Detect && std::arch::is_x86_feature_detected!("avx2");
    #[cfg(not(target_arch = "x86_64"))]
    let lanes = {
        let _ = how;
        false
    };
    let mut done = 0;
    #[cfg(target_arch = "x86_64")]
    if lanes {
        // SAFETY: the CPU has the feature the function is compiled for.
        done = unsafe { segment_args_avx2(times, log_dfs, (t_prev, l_prev, lambda), dl, args) };
    }
    for i in done..n {
        let u = times[i] - t_prev;
        let lq = Dual::new(l_prev - lambda * u, -u);
        dl[i] = lq;
        args[i] = lq.v + log_dfs[i];
    }
    crate::math::exp::exp_in_place(args);
    let mut done = 0;
    #[cfg(target_arch = "x86_64")]
    if lanes {
        // SAFETY: as above.
        done = unsafe { segment_pq_avx2(times, t_prev, args, dpq) };
    }
    for i in done..n {
        let e = args[i];
        dpq[i] = Dual::new(e, e * dl[i].d);
    }
}

/// Two AVX2 registers of values and derivatives (lanes in order) as four `Dual`s at `out`.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn store_duals(out: &mut [Dual], v: std::arch::x86_64::__m256d, d: std::arch::x86_64::__m256d) {
    use std::arch::x86_64::*;
    let (lo, hi) = (_mm256_unpacklo_pd(v, d), _mm256_unpackhi_pd(v, d));
    let out = &mut out[..4];
    // SAFETY: four `Dual`s (repr(C), two f64 each) are eight f64 in a row.
    unsafe {
        let p = out.as_mut_ptr().cast::<f64>();
        _mm256_storeu_pd(p, _mm256_permute2f128_pd::<0x20>(lo, hi));
        _mm256_storeu_pd(p.add(4), _mm256_permute2f128_pd::<0x31>(lo, hi));
    }
}

/// The arguments and ln Q of [`segment_points`], four points at a time; returns how many
/// points it did (a multiple of four).
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn segment_args_avx2(
    times: &[f64],
    log_dfs: &[f64],
    (t_prev, l_prev, lambda): (f64, f64, f64),
    dl: &mut [Dual],
    args: &mut [f64],
) -> usize {
    use std::arch::x86_64::*;
    let (tp, lp, lam, sign) =
        (_mm256_set1_pd(t_prev), _mm256_set1_pd(l_prev), _mm256_set1_pd(lambda), _mm256_set1_pd(-0.0));
    let n = times.len() / 4 * 4;
    for i in (0..n).step_by(4) {
        // SAFETY: i + 4 <= n <= the length of every slice.
        unsafe {
            let u = _mm256_sub_pd(_mm256_loadu_pd(times[i..i + 4].as_ptr()), tp);
            let lv = _mm256_sub_pd(lp, _mm256_mul_pd(lam, u));
            let ld = _mm256_xor_pd(u, sign);
            let arg = _mm256_add_pd(lv, _mm256_loadu_pd(log_dfs[i..i + 4].as_ptr()));
            _mm256_storeu_pd(args[i..i + 4].as_mut_ptr(), arg);
            store_duals(&mut dl[i..i + 4], lv, ld);
        }
    }
    n
}

/// P Q of [`segment_points`] from the exponentials, four points at a time; returns how many
/// points it did.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
fn segment_pq_avx2(times: &[f64], t_prev: f64, exps: &[f64], dpq: &mut [Dual]) -> usize {
    use std::arch::x86_64::*;
    let (tp, sign) = (_mm256_set1_pd(t_prev), _mm256_set1_pd(-0.0));
    let n = times.len() / 4 * 4;
    for i in (0..n).step_by(4) {
        // SAFETY: i + 4 <= n <= the length of every slice.
        unsafe {
            let ld = _mm256_xor_pd(_mm256_sub_pd(_mm256_loadu_pd(times[i..i + 4].as_ptr()), tp), sign);
            let e = _mm256_loadu_pd(exps[i..i + 4].as_ptr());
            store_duals(&mut dpq[i..i + 4], e, _mm256_mul_pd(e, ld));
        }
    }
    n
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::instruments::cds::{evaluate_terms, AccrualIntegration, CdsContract};
    use crate::sim::rng::Rng;
    use crate::time::{Calendar, Tenor};
    use chrono::NaiveDate;

    /// The lanes give `evaluate_terms` over `Dual`, bit for bit: every contract of a joint
    /// grid (6M to 10Y and an off-roll maturity, a flat and a sloped discount curve, every
    /// accrual variant), cut where the bootstrap cuts them (the intervals after each hazard
    /// node), at random hazards, derivatives and ln Q, with intervals short enough for the
    /// series form and long enough for the closed form, both on the lanes and one at a time.
    #[test]
    fn the_lanes_are_evaluate_terms_bit_for_bit() {
        let t = NaiveDate::from_ymd_opt(2024, 3, 20).unwrap();
        let cal = Calendar::weekends_only();
        let mut contracts: Vec<CdsContract> = [6, 12, 36, 60, 84, 120]
            .iter()
            .map(|&m| CdsContract::standard(t, Tenor::from_months(m).unwrap(), &cal).unwrap())
            .collect();
        contracts.push(CdsContract::with_maturity(t, NaiveDate::from_ymd_opt(2029, 1, 31).unwrap(), &cal));
        let refs: Vec<&CdsContract> = contracts.iter().collect();
        let nodes = [0.5, 1.0, 3.0, 5.0, 7.0, 10.0];
        let mut rng = Rng::new(20241203);
        let (mut scratch, mut series, mut closed, mut compared) = (Vec::new(), 0, 0, 0);
        let mut groups = [0usize; 3];
        for d in &crate::curves::discount::test_curves(t) {
            for accrual in [AccrualIntegration::Standard, AccrualIntegration::Exact, AccrualIntegration::Published] {
                let plan = LegPlan::build(t, &refs, d, &nodes, accrual);
                let np = plan.times.len();
                for round in 0..40 {
                    // Hazards from zero to 20 per year; on every sixth round ln Q about -ln P
                    // (a negative hazard offsetting the rate), where h + f is small enough for
                    // the series form on most intervals.
                    let scale = [0.0, 1e-6, 0.02, 0.3, 20.0, 0.0][round % 6];
                    let mut lq = Vec::with_capacity(np);
                    let (mut l, mut dl) = (0.0f64, 0.0f64);
                    for j in 0..np {
                        let dt = if j == 0 { plan.times[0].max(0.0) } else { plan.times[j] - plan.times[j - 1] };
                        l -= scale * rng.uniform() * dt;
                        dl -= rng.uniform() * dt;
                        let v = if round % 6 == 5 { -plan.log_dfs[j] + 1e-5 * rng.uniform() } else { l };
                        lq.push(Dual::new(v, dl));
                    }
                    let pq: Vec<Dual> = lq
                        .iter()
                        .zip(&plan.log_dfs)
                        .map(|(q, p)| {
                            let e = (q.v + p).exp();
                            Dual::new(e, e * q.d)
                        })
                        .collect();
                    for terms in &plan.contracts {
                        for cut in 0..terms.prot.len() {
                            let prot = &terms.prot[cut..];
                            let coupon_from = terms
                                .coupons
                                .iter()
                                .position(|c| plan.times[c.q_idx as usize] > plan.times[prot[0] as usize])
                                .unwrap_or(terms.coupons.len());
                            let coupons = &terms.coupons[coupon_from..];
                            let want = evaluate_terms(&plan, prot, coupons, &pq, &lq);
                            let layout = TermLayout::new(&plan, prot, coupons);
                            for how in [Lanes::Detect, Lanes::Scalar] {
                                let got = layout.evaluate_by(&pq, &lq, &mut scratch, how);
                                let bits = |x: (Dual, Dual, Dual)| {
                                    [x.0.v, x.0.d, x.1.v, x.1.d, x.2.v, x.2.d].map(f64::to_bits)
                                };
                                assert_eq!(bits(got), bits(want), "{how:?} {accrual:?} scale {scale} cut {cut}");
                                compared += 1;
                            }
                            let paths = coupons
                                .iter()
                                .filter(|c| c.paid)
                                .flat_map(|c| plan.aod_path[c.aod_from as usize..c.aod_to as usize].windows(2));
                            let is_series = |w: &[u32]| {
                                let (i0, i1) = (w[0] as usize, w[1] as usize);
                                let x = (lq[i0].v - lq[i1].v) + (plan.log_dfs[i0] - plan.log_dfs[i1]);
                                x < crate::instruments::cds::SERIES_THRESHOLD
                            };
                            let (prot_forms, aod_forms): (Vec<bool>, Vec<bool>) =
                                (prot.windows(2).map(is_series).collect(), paths.map(is_series).collect());
                            for part in [&prot_forms, &aod_forms] {
                                series += part.iter().filter(|&&s| s).count();
                                closed += part.iter().filter(|&&s| !s).count();
                                // The groups of four the lanes take: one form, or both.
                                for group in part.chunks(4) {
                                    let kind = match (group.iter().any(|&s| s), group.iter().all(|&s| s)) {
                                        (false, _) => 0,
                                        (true, false) => 1,
                                        (true, true) => 2,
                                    };
                                    groups[kind] += 1;
                                }
                            }
                        }
                    }
                }
            }
        }
        assert!(compared > 10_000 && series > 1_000 && closed > 1_000, "{compared} {series} {closed}");
        // Groups of four in each form: closed only, series only, and mixed (the lanes compute
        // only the form a group needs, both where it is mixed).
        assert!(groups.iter().all(|&g| g > 500), "closed, mixed, series groups: {groups:?}");
    }

    /// The segment's points four at a time are the formulas one point at a time, bit for bit,
    /// for every start and length (the four-point part and the rest).
    #[test]
    fn segment_points_are_the_point_by_point_formulas() {
        let mut rng = Rng::new(7);
        let n = 40;
        let times: Vec<f64> = (0..n).map(|j| j as f64 * 0.13 + rng.uniform() * 0.1).collect();
        let log_dfs: Vec<f64> = times.iter().map(|t| -0.03 * t - 0.001 * rng.uniform()).collect();
        let mut args = Vec::new();
        for from in 0..12 {
            for to in from..n {
                let (t_prev, l_prev, lambda) = (times[from] * 0.5, -0.2 * rng.uniform(), rng.uniform() * 0.8);
                for how in [Lanes::Detect, Lanes::Scalar] {
                    let (mut dl, mut dpq) = (vec![Dual::constant(9.0); n], vec![Dual::constant(9.0); n]);
                    segment_points(
                        &times,
                        &log_dfs,
                        from..to,
                        (t_prev, l_prev, lambda),
                        &mut dl,
                        &mut dpq,
                        &mut args,
                        how,
                    );
                    for j in 0..n {
                        let (want_l, want_pq) = if (from..to).contains(&j) {
                            let u = times[j] - t_prev;
                            let lq = Dual::new(l_prev - lambda * u, -u);
                            let e = crate::math::exp::exp(lq.v + log_dfs[j]);
                            (lq, Dual::new(e, e * lq.d))
                        } else {
                            (Dual::constant(9.0), Dual::constant(9.0))
                        };
                        let bits = |d: Dual| [d.v.to_bits(), d.d.to_bits()];
                        assert_eq!(bits(dl[j]), bits(want_l), "{how:?} {from}..{to} at {j}");
                        assert_eq!(bits(dpq[j]), bits(want_pq), "{how:?} {from}..{to} at {j}");
                    }
                }
            }
        }
    }
}
