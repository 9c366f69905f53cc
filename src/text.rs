//! Figures in words for people, shared by the library's messages and summaries and the command
//! line: counts with thin grouping (`1 234 567 points`), durations (`3.4 s`, `25 minutes`) and
//! memory sizes (`1.5 GiB`, parsed from `2G`, `500M`, `1.5GiB`; binary multiples).

/// `"1 centre"`, `"2 centres"`, `"1 234 567 centres"` (thin grouping for readability).
pub fn plural(n: usize, one: &str, many: &str) -> String {
    format!("{} {}", group(n), if n == 1 { one } else { many })
}

/// `n` with a space every three digits: `1 234 567`.
pub fn group(n: usize) -> String {
    let s = n.to_string();
    let mut out = String::with_capacity(s.len() + s.len() / 3);
    for (k, ch) in s.chars().enumerate() {
        if k > 0 && (s.len() - k).is_multiple_of(3) {
            out.push(' ');
        }
        out.push(ch);
    }
    out
}

/// A duration in words for people: `0.42 s`, `3.4 s`, `12 s`, `25 minutes`, `5.2 hours`,
/// `2.1 days`.
pub fn seconds_text(s: f64) -> String {
    if !s.is_finite() {
        return "an unbounded time".to_string();
    }
    if s < 1.0 {
        format!("{s:.2} s")
    } else if s < 10.0 {
        format!("{s:.1} s")
    } else if s < 90.0 {
        format!("{s:.0} s")
    } else if s < 90.0 * 60.0 {
        format!("{:.0} minutes", s / 60.0)
    } else if s < 48.0 * 3600.0 {
        format!("{:.1} hours", s / 3600.0)
    } else {
        format!("{:.1} days", s / 86400.0)
    }
}

/// A memory size in bytes; parsed from `2G`, `500M`, `1.5GiB`, `64k` (binary multiples) or a
/// plain number of bytes, shown as `512 MiB`, `1.5 GiB`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Size(pub u64);

impl std::str::FromStr for Size {
    type Err = String;

    fn from_str(t: &str) -> std::result::Result<Size, String> {
        let low = t.trim().to_ascii_lowercase();
        let body = low.trim_end_matches("ib").trim_end_matches('b');
        let (num, mult) = match body.chars().last() {
            Some('k') => (&body[..body.len() - 1], 1u64 << 10),
            Some('m') => (&body[..body.len() - 1], 1 << 20),
            Some('g') => (&body[..body.len() - 1], 1 << 30),
            Some('t') => (&body[..body.len() - 1], 1 << 40),
            _ => (body, 1),
        };
        match num.trim().parse::<f64>() {
            Ok(v) if v.is_finite() && v > 0.0 => Ok(Size((v * mult as f64) as u64)),
            _ => Err(format!(
                "{t} is not a memory size; give e.g. 2G, 500M or 1.5GiB"
            )),
        }
    }
}

impl std::fmt::Display for Size {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        let b = self.0 as f64;
        let (v, unit) = if b >= (1u64 << 30) as f64 {
            (b / (1u64 << 30) as f64, "GiB")
        } else if b >= (1 << 20) as f64 {
            (b / (1 << 20) as f64, "MiB")
        } else {
            (b / 1024.0, "KiB")
        };
        if v < 10.0 {
            write!(f, "{v:.1} {unit}")
        } else {
            write!(f, "{v:.0} {unit}")
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wording_helpers() {
        assert_eq!(plural(1, "centre", "centres"), "1 centre");
        assert_eq!(plural(0, "centre", "centres"), "0 centres");
        assert_eq!(plural(1_234_567, "point", "points"), "1 234 567 points");
        assert_eq!(group(999), "999");
        assert_eq!(group(1000), "1 000");
    }

    #[test]
    fn sizes_and_durations() {
        assert_eq!("2G".parse::<Size>().unwrap(), Size(2 << 30));
        assert_eq!("500m".parse::<Size>().unwrap(), Size(500 << 20));
        assert_eq!("1.5GiB".parse::<Size>().unwrap(), Size(3 << 29));
        assert!("-1G".parse::<Size>().is_err() && "lots".parse::<Size>().is_err());
        assert_eq!(Size(3 << 29).to_string(), "1.5 GiB");
        assert_eq!(Size(300 << 20).to_string(), "300 MiB");
        assert_eq!(seconds_text(0.123), "0.12 s");
        assert_eq!(seconds_text(200.0), "3 minutes");
        assert_eq!(seconds_text(2.5 * 86400.0), "2.5 days");
    }
}
