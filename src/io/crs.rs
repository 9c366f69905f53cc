//! Coordinate reference systems as the readers find them ([`super::FileInfo::crs`]): a short
//! label for summaries, and the check that the inputs of one run share one system.
//!
//! A CRS is kept as plain text: WKT (a LAS WKT record, an E57 `coordinateMetadata`) or LAS
//! GeoTIFF keys written `GeoTIFF keys id=value, …`. Two CRSs are the same when their texts are
//! equal up to white space; no reprojection is done anywhere.

/// A short label: for WKT the system's name and its authority code when the WKT ends with one
/// (`ETRS89 / UTM zone 32N (EPSG 25832)`); for GeoTIFF keys the projected (3072) or geographic
/// (2048) code when present (`EPSG 2994 (GeoTIFF keys)`); otherwise the text itself.
pub fn crs_label(crs: &str) -> String {
    let t = crs.trim();
    if t.starts_with("GeoTIFF keys ") {
        let code = geotiff_key(t, 3072).or_else(|| geotiff_key(t, 2048));
        let citation = geotiff_citation(t, 1026).or_else(|| geotiff_citation(t, 3073));
        return match (citation, code) {
            (Some(n), Some(c)) => format!("{n} (EPSG {c}, GeoTIFF keys)"),
            (None, Some(c)) => format!("EPSG {c} (GeoTIFF keys)"),
            _ => t.to_string(),
        };
    }
    let is_wkt = t.find('[').is_some_and(|i| {
        t[..i]
            .chars()
            .all(|c| c.is_ascii_uppercase() || c == '_' || c.is_ascii_digit())
    });
    if !is_wkt {
        return t.to_string();
    }
    let name = t.split('"').nth(1).unwrap_or("").to_string();
    // The outermost authority is the last AUTHORITY["EPSG","25832"] (WKT 1) or ID["EPSG",25832]
    // (WKT 2) before the final bracket.
    let code = ["AUTHORITY[", "ID["].iter().find_map(|tag| {
        let at = t.rfind(tag)?;
        let inner = &t[at + tag.len()..];
        let inner = &inner[..inner.find(']')?];
        let mut parts = inner.split(',').map(|p| p.trim().trim_matches('"'));
        let (auth, code) = (parts.next()?, parts.next()?);
        // Only the outermost: nothing but closing brackets after it.
        let tail = &t[at + tag.len() + inner.len() + 1..];
        tail.chars()
            .all(|c| c == ']' || c.is_whitespace())
            .then(|| format!("{auth} {code}"))
    });
    match (name.is_empty(), code) {
        (false, Some(c)) => format!("{name} ({c})"),
        (false, None) => name,
        (true, Some(c)) => c,
        (true, None) => t.chars().take(60).collect(),
    }
}

/// The whole-number value of GeoTIFF key `id` in a `GeoTIFF keys id=value, …` text.
pub fn geotiff_key(crs: &str, id: u16) -> Option<u32> {
    let rest = crs.trim().strip_prefix("GeoTIFF keys ")?;
    let key = format!("{id}=");
    rest.split(", ")
        .find_map(|kv| kv.strip_prefix(key.as_str()))
        .and_then(|v| v.parse().ok())
}

/// The text value of GeoTIFF key `id` (a citation), without its quotes.
fn geotiff_citation(crs: &str, id: u16) -> Option<String> {
    let rest = crs.trim().strip_prefix("GeoTIFF keys ")?;
    let key = format!("{id}=\"");
    let at = rest.find(key.as_str())? + key.len();
    let end = rest[at..].find('"')?;
    Some(rest[at..at + end].to_string()).filter(|s| !s.is_empty())
}

/// The linear unit of a GeoTIFF-keys CRS as its EPSG unit code (key 3076, projected linear
/// units, else 4099, vertical units): 9001 metre, 9002 international foot, 9003 US survey foot
/// (EPSG unit codes, from memory).
pub fn geotiff_linear_unit(crs: &str) -> Option<u32> {
    geotiff_key(crs, 3076).or_else(|| geotiff_key(crs, 4099))
}

/// The linear unit a CRS names, as a short label (`m`, `mm`, `ft`, `US survey ft`): GeoTIFF
/// unit codes (see [`geotiff_linear_unit`]), else the unit's name in the text (US survey foot
/// before the foot); `None` when none is recognised. The same reading as
/// `align::report::Units::from_crs`.
pub fn units_label(crs: &str) -> Option<String> {
    match geotiff_linear_unit(crs) {
        Some(9001) => return Some("m".into()),
        Some(9002) => return Some("ft".into()),
        Some(9003) => return Some("US survey ft".into()),
        _ => {}
    }
    let c = crs.to_ascii_lowercase();
    let label = if c.contains("us survey foot") || c.contains("foot_us") || c.contains("ftus") {
        "US survey ft"
    } else if c.contains("foot") || c.contains("feet") {
        "ft"
    } else if c.contains("metre") || c.contains("meter") {
        "m"
    } else {
        return None;
    };
    Some(label.into())
}

/// True when the two CRS texts are equal up to white space.
pub fn same_crs(a: &str, b: &str) -> bool {
    let norm = |s: &str| s.split_whitespace().collect::<String>();
    norm(a) == norm(b)
}

/// A warning when the inputs of one run (name, CRS) carry different coordinate reference
/// systems, naming each distinct one once with its first file; `None` when every input with a
/// CRS has the same one (inputs without a CRS are not counted against the others).
pub fn mixed_crs_warning(inputs: &[(&str, Option<&str>)]) -> Option<String> {
    let mut distinct: Vec<(&str, &str)> = Vec::new();
    for &(name, crs) in inputs {
        if let Some(c) = crs
            && !distinct.iter().any(|(_, d)| same_crs(d, c))
        {
            distinct.push((name, c));
        }
    }
    if distinct.len() < 2 {
        return None;
    }
    let listed: Vec<String> = distinct
        .iter()
        .map(|(n, c)| format!("{n}: {}", crs_label(c)))
        .collect();
    Some(format!(
        "the inputs are in different coordinate reference systems ({}); coordinates are used as they are, with no reprojection: reproject the files into one system first",
        listed.join("; ")
    ))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn labels() {
        let wkt = r#"PROJCS["ETRS89 / UTM zone 32N",GEOGCS["ETRS89",AUTHORITY["EPSG","4258"]],UNIT["metre",1],AUTHORITY["EPSG","25832"]]"#;
        assert_eq!(crs_label(wkt), "ETRS89 / UTM zone 32N (EPSG 25832)");
        let no_code = r#"PROJCS["local grid",UNIT["metre",1]]"#;
        assert_eq!(crs_label(no_code), "local grid");
        let inner_only = r#"PROJCS["x",GEOGCS["g",AUTHORITY["EPSG","4258"]],UNIT["metre",1]]"#;
        assert_eq!(crs_label(inner_only), "x");
        let wkt2 =
            r#"PROJCRS["NAD83 / Oregon GIC Lambert (ft)",BASEGEOGCRS["NAD83"],ID["EPSG",2994]]"#;
        assert_eq!(
            crs_label(wkt2),
            "NAD83 / Oregon GIC Lambert (ft) (EPSG 2994)"
        );
        assert_eq!(
            crs_label("GeoTIFF keys 1024=1, 1025=1, 3072=2994, 3076=9002"),
            "EPSG 2994 (GeoTIFF keys)"
        );
        let autzen = r#"GeoTIFF keys 1024=1, 1025=1, 1026="NAD83(HARN) / Oregon GIC Lambert (ft)", 2049="NAD83(HARN)", 2054=9102, 3072=2994, 3076=9002"#;
        assert_eq!(
            crs_label(autzen),
            "NAD83(HARN) / Oregon GIC Lambert (ft) (EPSG 2994, GeoTIFF keys)"
        );
        assert_eq!(geotiff_linear_unit(autzen), Some(9002));
    }

    #[test]
    fn mixed_systems_are_named_once() {
        let a = r#"PROJCS["A",AUTHORITY["EPSG","1"]]"#;
        let b = r#"PROJCS["B",AUTHORITY["EPSG","2"]]"#;
        assert_eq!(mixed_crs_warning(&[("x", Some(a)), ("y", None)]), None);
        assert_eq!(
            mixed_crs_warning(&[("x", Some(a)), ("y", Some(&format!(" {a} ")))]),
            None
        );
        let w = mixed_crs_warning(&[("x", Some(a)), ("y", Some(b)), ("z", Some(a))]).unwrap();
        assert!(w.contains("x: A (EPSG 1); y: B (EPSG 2))"), "{w}");
        assert!(!w.contains("z:"), "{w}");
    }
}
