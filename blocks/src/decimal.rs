//! Decimal text of floats for tables: the same characters as Rust's
//! `{:.N}` and `{:.Ne}` formatting, made with integer arithmetic.
//!
//! The standard formatter is exact but general (it falls back to big-number
//! arithmetic for many values), and the tables of a long capture write
//! millions of numbers. Here the value `m * 2^e` is scaled by a power of ten
//! as an exact fraction of two 128-bit integers and rounded half to even,
//! which is what the standard formatter does; values beyond that range are
//! handed to the standard formatter.

use std::fmt::Write;

/// Append `v` with `decimals` digits after the point, as `{v:.decimals$}` would.
pub fn push_fixed(out: &mut String, v: f64, decimals: usize) {
    match fixed_digits(v, decimals) {
        Some(q) => {
            if v.is_sign_negative() {
                out.push('-');
            }
            push_point(out, q, decimals);
        }
        None => {
            let _ = write!(out, "{v:.decimals$}");
        }
    }
}

/// Append `v` in scientific notation with `decimals` digits after the point,
/// as `{v:.decimals$e}` would.
pub fn push_sci(out: &mut String, v: f64, decimals: usize) {
    match sci_digits(v, decimals) {
        Some((q, exp)) => {
            if v.is_sign_negative() {
                out.push('-');
            }
            push_point(out, q, decimals);
            let _ = write!(out, "e{exp}");
        }
        None => {
            let _ = write!(out, "{v:.decimals$e}");
        }
    }
}

/// Append an integer, as `{v}` would.
pub fn push_int(out: &mut String, v: i128) {
    if v < 0 {
        out.push('-');
    }
    push_point(out, v.unsigned_abs(), 0);
}

/// Largest number of decimals handled here (10^9 keeps the products small).
const MAX_DECIMALS: usize = 9;

/// |v| = m * 2^e, exactly.
fn decompose(v: f64) -> (u64, i32) {
    let bits = v.to_bits();
    let biased = ((bits >> 52) & 0x7ff) as i32;
    let frac = bits & ((1u64 << 52) - 1);
    if biased == 0 { (frac, -1074) } else { (frac | (1u64 << 52), biased - 1075) }
}

/// round_half_even(m * 2^e * 10^s) for finite values, when the exact
/// fraction fits in 127-bit integers.
fn scaled(m: u64, e: i32, s: i32) -> Option<u128> {
    if m == 0 {
        return Some(0);
    }
    let pow10 = |p: i32| 10u128.checked_pow(p as u32);
    let mut num = m as u128;
    let mut den = 1u128;
    if s >= 0 {
        num = num.checked_mul(pow10(s)?)?;
    } else {
        den = pow10(-s)?;
    }
    if e >= 0 {
        if e >= 127 || num.leading_zeros() <= e as u32 + 1 {
            return None;
        }
        num <<= e;
    } else {
        let k = (-e) as u32;
        if den.leading_zeros() <= k + 1 {
            // Here den * 2^k >= 2^126, so with num < 2^125 the value is
            // below 1/2 and rounds to 0.
            return (num < (1u128 << 125)).then_some(0);
        }
        den <<= k;
    }
    if num >> 126 != 0 {
        return None;
    }
    // Dividing by a power of two (every fixed-point case) is a shift.
    let (q, r) =
        if den.is_power_of_two() { (num >> den.trailing_zeros(), num & (den - 1)) } else { (num / den, num % den) };
    let twice = r << 1;
    Some(if twice > den || (twice == den && q & 1 == 1) { q + 1 } else { q })
}

/// |v| * 10^decimals rounded half to even, when handled here.
fn fixed_digits(v: f64, decimals: usize) -> Option<u128> {
    if !v.is_finite() || decimals > MAX_DECIMALS {
        return None;
    }
    let (m, e) = decompose(v);
    scaled(m, e, decimals as i32)
}

/// (digits, exponent) with 10^decimals <= digits < 10^(decimals + 1) and
/// |v| = digits * 10^(exponent - decimals) after rounding; zero is (0, 0).
fn sci_digits(v: f64, decimals: usize) -> Option<(u128, i32)> {
    if !v.is_finite() || decimals > MAX_DECIMALS {
        return None;
    }
    let (m, e) = decompose(v);
    if m == 0 {
        return Some((0, 0));
    }
    let (low, high) = (10u128.pow(decimals as u32), 10u128.pow(decimals as u32 + 1));
    // The estimate can be one off near powers of ten; rounding up can also
    // carry into the next power.
    let mut exp = v.abs().log10().floor() as i32;
    for _ in 0..4 {
        let q = scaled(m, e, decimals as i32 - exp)?;
        if q >= high {
            exp += 1;
        } else if q < low {
            exp -= 1;
        } else {
            return Some((q, exp));
        }
    }
    None
}

/// `q / 10^decimals` with its fraction: "12.340" for (12340, 3).
fn push_point(out: &mut String, q: u128, decimals: usize) {
    // Digits are written from the right, the point among them.
    let mut text = [0u8; 48];
    let mut n = text.len();
    let mut put = |digit: u8, written: &mut usize| {
        if *written == decimals && decimals > 0 {
            n -= 1;
            text[n] = b'.';
        }
        n -= 1;
        text[n] = b'0' + digit;
        *written += 1;
    };
    let mut written = 0;
    // 64-bit division where the value allows (128-bit division is a call).
    let (mut wide, mut rest) = if q > u64::MAX as u128 { (q, 0) } else { (0, q as u64) };
    while wide != 0 {
        put((wide % 10) as u8, &mut written);
        wide /= 10;
        if wide <= u64::MAX as u128 {
            rest = wide as u64;
            wide = 0;
        }
    }
    loop {
        put((rest % 10) as u8, &mut written);
        rest /= 10;
        // At least one digit before the point.
        if rest == 0 && written > decimals {
            break;
        }
    }
    out.push_str(std::str::from_utf8(&text[n..]).unwrap_or_default());
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::dsp::rng::Rng;

    fn check(v: f64) {
        for d in 0..=MAX_DECIMALS + 1 {
            let mut s = String::new();
            push_fixed(&mut s, v, d);
            assert_eq!(s, format!("{v:.d$}"), "fixed {v:e} with {d} decimals");
            s.clear();
            push_sci(&mut s, v, d);
            assert_eq!(s, format!("{v:.d$e}"), "sci {v:e} with {d} decimals");
        }
    }

    #[test]
    fn integers_as_the_standard_formatter() {
        for v in [
            0i128,
            1,
            -1,
            9,
            10,
            -10,
            99,
            100,
            i64::MAX as i128,
            u64::MAX as i128,
            u64::MAX as i128 + 1,
            i128::MIN,
            i128::MAX,
        ] {
            let mut s = String::new();
            push_int(&mut s, v);
            assert_eq!(s, v.to_string());
        }
    }

    #[test]
    fn same_text_as_the_standard_formatter() {
        // The standard formatter is the reference: exact decimal expansion,
        // rounded half to even.
        let special = [
            0.0,
            -0.0,
            0.5,
            1.5,
            2.5,
            0.125,
            -0.125,
            123456.5,
            1234567.5,
            9.9999995,
            0.099999999,
            9.5,
            99.5,
            999999.9999999,
            1e-300,
            f64::MIN_POSITIVE,
            5e-324,
            1e15,
            1e22,
            1e23,
            1.7e300,
            f64::MAX,
            -f64::MAX,
            0.1,
            0.7,
            299_792_458.0,
        ];
        for v in special {
            check(v);
            check(-v);
        }
        let mut rng = Rng::new(3);
        for _ in 0..20_000 {
            let mantissa = rng.uniform() * 10.0;
            let exp = (rng.uniform() * 60.0 - 30.0).round() as i32;
            check(mantissa * 10f64.powi(exp));
            // Exact ties: multiples of a small power of two.
            let tie = (rng.uniform() * 4096.0).round() / 64.0;
            check(tie);
        }
        for k in -40..40 {
            let p = 10f64.powi(k);
            check(p);
            check(p.next_up());
            check(p.next_down());
        }
    }
}
