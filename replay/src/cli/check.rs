//! Value checks for arguments, run by clap while parsing, so a command
//! never starts on a value it cannot use.

/// A tolerance: a finite, non-negative number.
///
/// # Errors
/// A message saying what is wrong with the text.
pub fn tolerance(text: &str) -> Result<f64, String> {
    let v: f64 = text
        .trim()
        .parse()
        .map_err(|_| format!("'{text}' is not a number"))?;
    if !v.is_finite() || v < 0.0 {
        return Err(format!("'{text}': a tolerance is finite and not negative"));
    }
    Ok(v)
}

/// A simulated time limit, s: finite and positive.
///
/// # Errors
/// A message saying what is wrong with the text.
pub fn time_limit_s(text: &str) -> Result<f64, String> {
    let v: f64 = text
        .trim()
        .parse()
        .map_err(|_| format!("'{text}' is not a number of seconds"))?;
    if !v.is_finite() || v <= 0.0 {
        return Err(format!("'{text}': a time limit is finite and positive"));
    }
    Ok(v)
}

/// A percentage in [0, 100].
///
/// # Errors
/// A message saying what is wrong with the text.
pub fn percent(text: &str) -> Result<f64, String> {
    let v: f64 = text
        .trim()
        .trim_end_matches('%')
        .parse()
        .map_err(|_| format!("'{text}' is not a percentage"))?;
    if !(0.0..=100.0).contains(&v) {
        return Err(format!("'{text}': a percentage is from 0 to 100"));
    }
    Ok(v)
}

/// A demo name, with or without its `demo:` prefix; returned without it.
///
/// # Errors
/// An empty name.
pub fn demo_name(text: &str) -> Result<String, String> {
    let key = text.strip_prefix("demo:").unwrap_or(text);
    if key.is_empty() {
        return Err("an empty demo name (see `replay scenarios`)".to_string());
    }
    Ok(key.to_string())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tolerances_are_finite_and_not_negative() {
        assert_eq!(tolerance("1e-3"), Ok(1e-3));
        assert_eq!(tolerance("0"), Ok(0.0));
        for bad in ["-1", "nan", "inf", "-inf", "x"] {
            assert!(tolerance(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn time_limits_are_positive() {
        assert_eq!(time_limit_s("30"), Ok(30.0));
        for bad in ["0", "-3", "nan", "inf"] {
            assert!(time_limit_s(bad).is_err(), "{bad}");
        }
    }

    #[test]
    fn percentages_and_demo_names() {
        assert_eq!(percent("99.5"), Ok(99.5));
        assert_eq!(percent("95%"), Ok(95.0));
        assert!(percent("101").is_err());
        assert!(percent("-1").is_err());
        assert_eq!(demo_name("demo:wrens-slot").as_deref(), Ok("wrens-slot"));
        assert_eq!(demo_name("wrens-slot").as_deref(), Ok("wrens-slot"));
        assert!(demo_name("demo:").is_err());
    }
}
