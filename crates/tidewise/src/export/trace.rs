//! The operation trace an HDL test bench replays: every multiply-accumulate and every row
//! update of the exported steps, one record after another in a memory file of 64-bit words.
//!
//! Each record starts with a kind word and the number of terms `n`, then the formats of its
//! operands as plain integers (fraction bits, word bits, rounding and overflow codes), then
//! the operand words sign-extended to 64 bits, then the results. The layouts (also written
//! into the folder's README and `manifest.json`):
//!
//! ```text
//! MAC (kind 1):    1 n acc_bits acc_overflow frac_a frac_b has_bias frac_bias bias
//!                  out_word out_frac out_rounding out_overflow thr_bias thr_out
//!                  a[0..n] b[0..n]  result
//! UPDATE (kind 2): 2 n frac_rate frac_delta step_word step_frac step_rounding step_overflow
//!                  frac_x w_word w_frac w_rounding w_overflow eta delta thr_step
//!                  x[0..n] thr[0..n] before[0..n]  step after[0..n]
//! END (kind 0):    0
//! ```
//!
//! Rounding codes: 0 floor, 1 nearest-even, 2 stochastic. Overflow codes: 0 saturate, 1 wrap.
//! `thr_*` are the stochastic-rounding thresholds of each rounding site, already reduced to
//! the `s` bits its remainder has (round up when the threshold is below the remainder); 0 at
//! sites that do not round stochastically.

use tidewise_core::backend::FixedConfig;
use tidewise_core::class::{Class, Tag};
use tidewise_core::format::{Format, Overflow};
use tidewise_core::round::Rounding;

use super::record::Record;

/// Kind word of a multiply-accumulate record.
pub const MAC: i64 = 1;
/// Kind word of a row-update record.
pub const UPDATE: i64 = 2;
/// Kind word ending the trace.
pub const END: i64 = 0;

/// The layouts, as text for the folder's README and the manifest.
pub const LAYOUT: [&str; 3] = [
    "MAC (kind 1): 1 n acc_bits acc_overflow frac_a frac_b has_bias frac_bias bias out_word out_frac out_rounding out_overflow thr_bias thr_out a[0..n] b[0..n] result",
    "UPDATE (kind 2): 2 n frac_rate frac_delta step_word step_frac step_rounding step_overflow frac_x w_word w_frac w_rounding w_overflow eta delta thr_step x[0..n] thr[0..n] before[0..n] step after[0..n]",
    "END (kind 0): 0",
];

/// The code of a rounding mode.
pub fn rounding_code(r: Rounding) -> i64 {
    match r {
        Rounding::Floor => 0,
        Rounding::NearestEven => 1,
        Rounding::Stochastic => 2,
    }
}

/// The code of an overflow policy.
pub fn overflow_code(o: Overflow) -> i64 {
    match o {
        Overflow::Saturate => 0,
        Overflow::Wrap => 1,
    }
}

fn frac(cfg: &FixedConfig, t: Tag) -> i64 {
    i64::from(cfg.format(t).frac())
}

fn dest(cfg: &FixedConfig, t: Tag, out: &mut Vec<i64>) {
    let s = cfg.spec(t);
    let f: Format = s.format;
    out.extend([
        i64::from(f.word()),
        i64::from(f.frac()),
        rounding_code(s.rounding),
        overflow_code(f.overflow()),
    ]);
}

/// Appends the words of `records` to `out` (without the END word).
pub fn encode(cfg: &FixedConfig, records: &[Record], out: &mut Vec<i64>) {
    for r in records {
        match r {
            Record::Dot(d) => {
                out.extend([
                    MAC,
                    d.a.len() as i64,
                    i64::from(cfg.acc_bits),
                    overflow_code(cfg.acc_overflow),
                    frac(cfg, d.at),
                    frac(cfg, d.bt),
                ]);
                match d.bias {
                    Some((t, v)) => out.extend([1, frac(cfg, t), v]),
                    None => out.extend([0, 0, 0]),
                }
                dest(cfg, d.out, out);
                out.extend([d.thr_bias as i64, d.thr_out as i64]);
                out.extend(&d.a);
                out.extend(&d.b);
                out.push(d.result);
            }
            Record::Update(u) => {
                out.extend([
                    UPDATE,
                    u.x.len() as i64,
                    frac(cfg, Tag::global(Class::Rate)),
                    frac(cfg, u.dt),
                ]);
                dest(cfg, Tag::global(Class::Step), out);
                out.push(frac(cfg, u.xt));
                dest(cfg, u.wt, out);
                out.extend([u.eta, u.delta, u.thr_step as i64]);
                out.extend(&u.x);
                out.extend(u.thr.iter().map(|&t| t as i64));
                out.extend(&u.before);
                out.push(u.step);
                out.extend(&u.after);
            }
        }
    }
}

/// Counts of the records in a trace: `(mac, update)`.
pub fn counts(records: &[Record]) -> (usize, usize) {
    let mac = records
        .iter()
        .filter(|r| matches!(r, Record::Dot(_)))
        .count();
    (mac, records.len() - mac)
}
