//! The one home of number formatting: every number in every rendering
//! goes through here.

/// A number with 4 significant digits in scientific notation (`-1.234e-5`),
/// `0` for zero, `NaN`, `inf`, `-inf`.
///
/// Scientific notation for all magnitudes keeps columns comparable at a
/// glance: the exponent lines up with the exponent.
pub(crate) fn num(x: f64) -> String {
    if x == 0.0 {
        "0".to_string()
    } else if x.is_nan() {
        "NaN".to_string()
    } else if x.is_infinite() {
        if x > 0.0 { "inf" } else { "-inf" }.to_string()
    } else {
        format!("{x:.3e}")
    }
}

/// A factor for a sentence, 3 significant digits, plain decimals between
/// 1e-3 and 1e4 (`0.447`, `2.1`, `1`), scientific notation outside
/// (`2.50e-5`).
pub(crate) fn short(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        return num(x);
    }
    let a = x.abs();
    if !(1e-3..1e4).contains(&a) {
        return format!("{x:.2e}");
    }
    let decimals = (2 - a.log10().floor() as i32).max(0) as usize;
    let text = format!("{x:.decimals$}");
    if text.contains('.') {
        text.trim_end_matches('0').trim_end_matches('.').to_string()
    } else {
        text
    }
}

/// A shape or multi-index as `[2, 3]` (`[]` for rank 0).
pub(crate) fn shape_string(shape: &[usize]) -> String {
    let parts: Vec<String> = shape.iter().map(usize::to_string).collect();
    format!("[{}]", parts.join(", "))
}

/// A short error figure with 2 significant digits (`3.1e-12`).
pub(crate) fn err(x: f64) -> String {
    if x == 0.0 || !x.is_finite() {
        num(x)
    } else {
        format!("{x:.1e}")
    }
}

/// Shortens `s` to at most `max` characters by cutting out its middle.
pub(crate) fn shorten_middle(s: &str, max: usize) -> String {
    let n = s.chars().count();
    if n <= max || max < 5 {
        return s.to_string();
    }
    let keep = max - 1;
    let head = keep.div_ceil(2);
    let tail = keep - head;
    let chars: Vec<char> = s.chars().collect();
    let mut out: String = chars[..head].iter().collect();
    out.push('…');
    out.extend(&chars[n - tail..]);
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers() {
        assert_eq!(num(0.0), "0");
        assert_eq!(num(-1.23456e-5), "-1.235e-5");
        assert_eq!(num(f64::NAN), "NaN");
        assert_eq!(num(f64::NEG_INFINITY), "-inf");
        assert_eq!(err(3.14159e-12), "3.1e-12");
        assert_eq!(short(0.5), "0.5");
        assert_eq!(short(2.1), "2.1");
        assert_eq!(short(1.0), "1");
        assert_eq!(short(0.447_213_6), "0.447");
        assert_eq!(short(-12.345), "-12.3");
        assert_eq!(short(2.5e-5), "2.50e-5");
    }

    #[test]
    fn shortening_keeps_both_ends() {
        assert_eq!(
            shorten_middle("encoder.block3.attention.w_query", 15),
            "encoder…w_query"
        );
        assert_eq!(shorten_middle("short", 15), "short");
    }
}

/// Serde for floats that may be NaN or infinite: finite values as JSON
/// numbers, the others as the strings `"NaN"`, `"inf"`, `"-inf"`, so a
/// report reads back into the identical value.
pub(crate) mod float_text {
    use serde::{Deserialize, Deserializer, Serializer};

    pub fn serialize<S: Serializer>(x: &f64, s: S) -> Result<S::Ok, S::Error> {
        if x.is_finite() {
            s.serialize_f64(*x)
        } else if x.is_nan() {
            s.serialize_str("NaN")
        } else if *x > 0.0 {
            s.serialize_str("inf")
        } else {
            s.serialize_str("-inf")
        }
    }

    #[derive(Deserialize)]
    #[serde(untagged)]
    enum Either {
        Number(f64),
        Text(String),
    }

    pub fn deserialize<'de, D: Deserializer<'de>>(d: D) -> Result<f64, D::Error> {
        match Either::deserialize(d)? {
            Either::Number(x) => Ok(x),
            Either::Text(t) => match t.as_str() {
                "NaN" => Ok(f64::NAN),
                "inf" => Ok(f64::INFINITY),
                "-inf" => Ok(f64::NEG_INFINITY),
                other => Err(serde::de::Error::custom(format!(
                    "expected a number, \"NaN\", \"inf\" or \"-inf\", found \"{other}\""
                ))),
            },
        }
    }
}
