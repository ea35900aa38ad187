//! Text contrast of the report's palette: every text colour against every background it is drawn on
//! must reach 4.5:1, the WCAG 2.1 level AA threshold for normal text (W3C, "Web Content Accessibility
//! Guidelines 2.1", success criterion 1.4.3; relative luminance and contrast ratio as defined there).

mod common;

fn var(css: &str, name: &str) -> (f64, f64, f64) {
    let key = format!("--{name}:");
    let at = css.find(&key).unwrap_or_else(|| panic!("report.css defines no {key}"));
    let hex = css[at + key.len()..].trim_start().trim_start_matches('#');
    let c = |i: usize| f64::from(u8::from_str_radix(&hex[i..i + 2], 16).unwrap()) / 255.0;
    (c(0), c(2), c(4))
}

fn luminance((r, g, b): (f64, f64, f64)) -> f64 {
    let lin = |c: f64| if c <= 0.03928 { c / 12.92 } else { ((c + 0.055) / 1.055).powf(2.4) };
    0.2126 * lin(r) + 0.7152 * lin(g) + 0.0722 * lin(b)
}

fn contrast(a: (f64, f64, f64), b: (f64, f64, f64)) -> f64 {
    let (la, lb) = (luminance(a), luminance(b));
    (la.max(lb) + 0.05) / (la.min(lb) + 0.05)
}

#[test]
fn palette_text_contrast_is_at_least_4_5() {
    let css = std::fs::read_to_string(common::root("templates/report.css")).unwrap();
    // Known pair from the WCAG definition: black on white is 21:1.
    assert!((contrast((0.0, 0.0, 0.0), (1.0, 1.0, 1.0)) - 21.0).abs() < 1e-9);
    for text in ["ink", "muted", "teal", "ochre", "plum", "warn"] {
        for background in ["paper", "panel"] {
            let ratio = contrast(var(&css, text), var(&css, background));
            assert!(ratio >= 4.5, "--{text} on --{background}: contrast {ratio:.2} is below 4.5:1");
        }
    }
}
