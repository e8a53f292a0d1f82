//! Number parsing for the CSV readers: a float parser that gives `str::parse::<f64>`'s result
//! bit for bit, faster on the plain decimals tables hold.

/// Parse a float as `str::parse::<f64>` does, bit for bit. Plain decimals with at most 19
/// mantissa digits whose value `m` is below `2^53` and whose decimal exponent `e` satisfies
/// `|e| <= 22` take Clinger's fast path (W. D. Clinger, "How to read floating point numbers
/// accurately", PLDI 1990): `m` and `10^|e|` are exact doubles, so one correctly rounded
/// multiplication or division gives the correctly rounded result. Everything else goes to
/// the standard library.
pub(crate) fn parse_float(b: &[u8]) -> Option<f64> {
    const POW10: [f64; 23] = [
        1e0, 1e1, 1e2, 1e3, 1e4, 1e5, 1e6, 1e7, 1e8, 1e9, 1e10, 1e11, 1e12, 1e13, 1e14, 1e15, 1e16,
        1e17, 1e18, 1e19, 1e20, 1e21, 1e22,
    ];
    let slow = || std::str::from_utf8(b).ok().and_then(|s| s.parse().ok());
    let (neg, rest) = match b.first() {
        Some(b'-') => (true, &b[1..]),
        Some(b'+') => (false, &b[1..]),
        _ => (false, b),
    };
    let mut m: u64 = 0;
    let (mut digits, mut frac, mut i) = (0u32, 0i64, 0);
    let mut seen_point = false;
    while i < rest.len() {
        match rest[i] {
            c @ b'0'..=b'9' => {
                if digits > 0 || c != b'0' {
                    digits += 1;
                }
                if digits > 19 {
                    return slow();
                }
                m = m * 10 + u64::from(c - b'0');
                if seen_point {
                    frac += 1;
                }
            }
            b'.' if !seen_point => seen_point = true,
            _ => break,
        }
        i += 1;
    }
    let mantissa_chars = i - usize::from(seen_point);
    if mantissa_chars == 0 {
        return slow();
    }
    let mut exp: i64 = 0;
    if i < rest.len() {
        if rest[i] != b'e' && rest[i] != b'E' {
            return slow();
        }
        let tail = &rest[i + 1..];
        let (eneg, edigits) = match tail.first() {
            Some(b'-') => (true, &tail[1..]),
            Some(b'+') => (false, &tail[1..]),
            _ => (false, tail),
        };
        if edigits.is_empty() || edigits.len() > 4 || !edigits.iter().all(u8::is_ascii_digit) {
            return slow();
        }
        exp = edigits
            .iter()
            .fold(0i64, |a, &c| a * 10 + i64::from(c - b'0'));
        if eneg {
            exp = -exp;
        }
    }
    let e = exp - frac;
    if m >= 1 << 53 || e.abs() > 22 {
        return slow();
    }
    let v = m as f64;
    let v = if e >= 0 {
        v * POW10[e as usize]
    } else {
        v / POW10[(-e) as usize]
    };
    Some(if neg { -v } else { v })
}

#[cfg(test)]
mod tests {
    use super::parse_float;
    use rand::{Rng, SeedableRng};
    use rand_chacha::ChaCha8Rng;

    // Reference: the standard library's correctly rounded parser; the fast path must agree
    // bit for bit on every input, including those it hands back to the standard library.
    #[test]
    fn parse_float_equals_the_standard_parser_bit_for_bit() {
        let fixed = [
            "0",
            "-0",
            "+0",
            "0.0",
            "-0.0",
            "1",
            "-1",
            "0.00227233",
            "-0.000445675",
            "1.5e-3",
            "2E+5",
            "1e22",
            "1e23",
            "9007199254740993",
            "9007199254740992",
            "123456789012345678",
            "1234567890123456789",
            "12345678901234567890",
            "0.1",
            "1.",
            ".5",
            "-.5",
            ".",
            "",
            "-",
            "e5",
            "1e",
            "1e+",
            "1x",
            "1.2.3",
            "inf",
            "-inf",
            "NaN",
            "nan",
            "1e-400",
            "1e400",
            "4.9e-324",
            "1.7976931348623157e308",
            "00000000000000000000001",
            "0.0000000000000000000000001",
            "1_0",
            " 1",
            "1 ",
            "+-1",
            "1e99999",
        ];
        let check = |s: &str| {
            let want = s.parse::<f64>().ok();
            let got = parse_float(s.as_bytes());
            assert_eq!(got.map(f64::to_bits), want.map(f64::to_bits), "`{s}`");
        };
        for s in fixed {
            check(s);
        }
        // Seeded random decimals in the forms tables use: fixed and scientific notation
        // with 1 to 19 significant digits and exponents around the fast path's limits.
        let mut rng = ChaCha8Rng::seed_from_u64(14);
        for _ in 0..200_000 {
            let digits: u32 = rng.gen_range(1..=19);
            let m: u64 = rng.gen_range(0..10u64.pow(digits));
            let sign = if rng.gen_bool(0.5) { "-" } else { "" };
            let s = match rng.gen_range(0..3) {
                0 => {
                    let text = m.to_string();
                    let point = rng.gen_range(0..=text.len());
                    format!("{sign}{}.{}", &text[..point], &text[point..])
                }
                1 => format!("{sign}{m}e{}", rng.gen_range(-30..=30)),
                _ => format!("{sign}0.{:0>w$}", m, w = rng.gen_range(1..=25)),
            };
            check(&s);
        }
    }
}
