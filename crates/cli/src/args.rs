//! Parsing of the command line's own value syntax.

use anyhow::{Result, bail};

/// How `profile` prints its document.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum Format {
    /// The JSON profile document (the same as the service returns).
    Json,
    /// Aligned columns with units, for a person.
    Table,
}

/// Parses `BOTTOM-TOP` in hPa, for example `1000-500`.
pub fn parse_layer(text: &str) -> Result<(f64, f64)> {
    let Some((bottom, top)) = text.split_once('-') else {
        bail!("--layer {text:?}: expected BOTTOM-TOP in hPa, for example 1000-500");
    };
    let number = |s: &str| -> Result<f64> {
        match s.trim().parse::<f64>() {
            Ok(v) if v.is_finite() && v > 0.0 => Ok(v),
            _ => bail!("--layer {text:?}: {s:?} is not a positive pressure in hPa"),
        }
    };
    let (bottom, top) = (number(bottom)?, number(top)?);
    if bottom <= top {
        bail!(
            "--layer {text:?}: the bottom ({bottom} hPa) must have a higher pressure than the top ({top} hPa)"
        );
    }
    Ok((bottom, top))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn layers_parse_and_bad_ones_say_why() {
        assert_eq!(parse_layer("1000-500").unwrap(), (1000.0, 500.0));
        assert_eq!(parse_layer(" 850 - 300 ").unwrap(), (850.0, 300.0));
        for (text, needle) in
            [("1000", "BOTTOM-TOP"), ("500-1000", "higher pressure"), ("x-500", "not a positive")]
        {
            let err = parse_layer(text).unwrap_err().to_string();
            assert!(err.contains(needle), "{text}: {err}");
        }
    }
}
