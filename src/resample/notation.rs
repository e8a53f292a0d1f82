//! The `value(error)` notation of results: the error to two significant digits in units of
//! the last printed digit of the value (common practice), e.g. `0.9234(56)`.

/// `value(error)` with the error rounded to two significant digits and written in units of
/// the last digit of the value: `fmt_value_error(0.92341, 0.00563) == "0.9234(56)"`,
/// `fmt_value_error(12.345, 1.2) == "12.3(12)"`, `fmt_value_error(12344.0, 123.0) ==
/// "12340(120)"`. A zero error prints as `value(0)`; a non-finite value or error prints both
/// plainly, e.g. `1.5(NaN)`.
pub fn fmt_value_error(value: f64, error: f64) -> String {
    let e = error.abs();
    if !value.is_finite() || !e.is_finite() {
        return format!("{value}({e})");
    }
    if e == 0.0 {
        return format!("{value}(0)");
    }
    // Decimal places that leave two significant digits of the error.
    let mut decimals = 1 - e.log10().floor() as i32;
    let mut units = (e * 10f64.powi(decimals)).round();
    if units >= 100.0 {
        // Rounding carried into a third digit (e.g. 0.0996 -> 100): one place fewer.
        decimals -= 1;
        units = (e * 10f64.powi(decimals)).round();
    }
    if decimals >= 0 {
        format!("{value:.prec$}({units:.0})", prec = decimals as usize)
    } else {
        let scale = 10f64.powi(-decimals);
        let v = (value / scale).round() * scale;
        format!("{v:.0}({:.0})", units * scale)
    }
}
