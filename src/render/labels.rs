//! Plot labels out of the SVG and into the typeset page. plotters writes each label as an
//! SVG `<text>`; typst's SVG reader builds a shaping face of the font for every one, which was
//! most of the cost of a plot. Here the labels are taken out of the SVG with where the SVG
//! text rules would put them (anchor, baseline shift in em or ex, rotation), and the template
//! sets them over the image as ordinary text: one face for the whole record, and labels
//! that can be searched and copied. A `<text>` this reader does not understand stays in the SVG.

use serde::Serialize;

/// One label, in the SVG's user units (pixels, y down).
#[derive(Debug, Clone, PartialEq, Serialize)]
pub struct Label {
    pub text: String,
    /// The anchor point (before rotation).
    pub x: f64,
    pub y: f64,
    /// Baseline below the anchor point, along the label's own vertical.
    pub dy: f64,
    /// "start", "middle" or "end": which point of the label's width sits on `x`.
    pub anchor: &'static str,
    pub size: f64,
    /// Clockwise, in degrees, about the anchor point.
    pub rotate: f64,
    pub fill: String,
}

/// The SVG without its plain `<text>` elements, and those elements as labels.
pub fn split(svg: &str) -> (String, Vec<Label>) {
    let mut out = String::with_capacity(svg.len());
    let mut labels = Vec::new();
    let mut rest = svg;
    while let Some(start) = rest.find("<text ") {
        out.push_str(&rest[..start]);
        let tail = &rest[start..];
        let Some(end) = tail.find("</text>") else {
            break;
        };
        let element = &tail[..end + "</text>".len()];
        match label(element) {
            Some(l) => labels.push(l),
            None => out.push_str(element),
        }
        rest = tail[element.len()..]
            .strip_prefix('\n')
            .unwrap_or(&tail[element.len()..]);
    }
    out.push_str(rest);
    (out, labels)
}

/// The attributes of an open tag, in order.
fn attributes(tag: &str) -> Vec<(&str, &str)> {
    let mut v = Vec::new();
    let mut s = tag;
    while let Some(eq) = s.find("=\"") {
        let name = s[..eq]
            .rsplit(|c: char| c.is_whitespace())
            .next()
            .unwrap_or("");
        let after = &s[eq + 2..];
        let Some(close) = after.find('"') else { break };
        v.push((name, &after[..close]));
        s = &after[close + 1..];
    }
    v
}

fn unescape(s: &str) -> Option<String> {
    let mut out = String::new();
    let mut rest = s;
    while let Some(i) = rest.find('&') {
        out.push_str(&rest[..i]);
        let j = rest[i..].find(';')? + i;
        let ent = &rest[i + 1..j];
        let c = match ent {
            "amp" => '&',
            "lt" => '<',
            "gt" => '>',
            "quot" => '"',
            "apos" => '\'',
            _ => {
                let n = if let Some(h) = ent.strip_prefix("#x") {
                    u32::from_str_radix(h, 16).ok()?
                } else {
                    ent.strip_prefix('#')?.parse().ok()?
                };
                char::from_u32(n)?
            }
        };
        out.push(c);
        rest = &rest[j + 1..];
    }
    out.push_str(rest);
    Some(out)
}

/// A `dy` length in user units: `N`, `Npx`, `Nem`, `Nex` (an ex taken as half the size, as
/// typst's SVG reader takes it).
fn length(v: &str, size: f64) -> Option<f64> {
    let v = v.trim();
    if let Some(n) = v.strip_suffix("em") {
        Some(n.trim().parse::<f64>().ok()? * size)
    } else if let Some(n) = v.strip_suffix("ex") {
        Some(n.trim().parse::<f64>().ok()? * size / 2.0)
    } else {
        v.strip_suffix("px").unwrap_or(v).parse().ok()
    }
}

/// `rotate(A, X, Y)` about the anchor point, or no transform.
fn rotation(t: Option<&str>, x: f64, y: f64) -> Option<f64> {
    let Some(t) = t else { return Some(0.0) };
    let inner = t.trim().strip_prefix("rotate(")?.strip_suffix(')')?;
    let nums: Vec<f64> = inner
        .split([',', ' '])
        .filter(|s| !s.is_empty())
        .map(|s| s.parse().ok())
        .collect::<Option<_>>()?;
    match nums[..] {
        [a] if x == 0.0 && y == 0.0 => Some(a),
        [a, cx, cy] if cx == x && cy == y => Some(a),
        _ => None,
    }
}

/// Two decimals are a hundredth of a pixel: plenty, and the data stays stable.
fn round(v: f64) -> f64 {
    (v * 100.0).round() / 100.0
}

/// One `<text …>label</text>` element, or None to leave it in the SVG.
fn label(element: &str) -> Option<Label> {
    let open_end = element.find('>')?;
    let tag = &element[..open_end];
    let body = element.get(open_end + 1..element.len() - "</text>".len())?;
    if body.contains('<') {
        return None;
    }
    let attrs = attributes(tag);
    let get = |k: &str| attrs.iter().find(|a| a.0 == k).map(|a| a.1);
    let known = [
        "x",
        "y",
        "dy",
        "text-anchor",
        "font-family",
        "font-size",
        "opacity",
        "fill",
        "transform",
    ];
    if attrs.iter().any(|a| !known.contains(&a.0)) || get("opacity").is_some_and(|o| o != "1") {
        return None;
    }
    // Default white space handling: runs collapse to one space, the ends are trimmed.
    let text = unescape(body)?
        .split_whitespace()
        .collect::<Vec<_>>()
        .join(" ");
    let size: f64 = get("font-size")?.parse().ok()?;
    let x: f64 = get("x").unwrap_or("0").parse().ok()?;
    let y: f64 = get("y").unwrap_or("0").parse().ok()?;
    let dy = get("dy").map_or(Some(0.0), |v| length(v, size))?;
    let anchor = match get("text-anchor").unwrap_or("start") {
        "start" => "start",
        "middle" => "middle",
        "end" => "end",
        _ => return None,
    };
    let fill = get("fill").unwrap_or("#000000");
    if !(fill.len() == 7 && fill.starts_with('#')) {
        return None;
    }
    Some(Label {
        text,
        x: round(x),
        y: round(y),
        dy: round(dy),
        anchor,
        size: round(size),
        rotate: rotation(get("transform"), x, y)?,
        fill: fill.to_string(),
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    // The SVG 1.1 text rules (W3C, sections 10.4 and 10.9.1): `dy` shifts the baseline,
    // `text-anchor` says which end of the text sits on `x`, and `rotate(a, cx, cy)` turns
    // about the point given.
    #[test]
    fn labels_leave_the_svg_with_their_placement() {
        let svg = concat!(
            "<svg>\n<rect x=\"0\"/>\n",
            "<text x=\"10\" y=\"140\" dy=\"0.76em\" text-anchor=\"middle\" font-family=\"Libertinus Serif\" ",
            "font-size=\"10\" opacity=\"1\" fill=\"#000000\" transform=\"rotate(270, 10, 140)\">\nC / nF\n</text>\n",
            "<text x=\"70\" y=\"208\" dy=\"0.5ex\" text-anchor=\"end\" font-size=\"12\">\n1 &lt; 2\n</text>\n",
            "</svg>"
        );
        let (rest, labels) = split(svg);
        assert_eq!(rest, "<svg>\n<rect x=\"0\"/>\n</svg>");
        assert_eq!(labels.len(), 2);
        let a = &labels[0];
        assert_eq!(
            (a.text.as_str(), a.x, a.y, a.dy),
            ("C / nF", 10.0, 140.0, 7.6)
        );
        assert_eq!((a.anchor, a.rotate, a.size), ("middle", 270.0, 10.0));
        let b = &labels[1];
        assert_eq!(
            (b.text.as_str(), b.dy, b.anchor, b.rotate),
            ("1 < 2", 3.0, "end", 0.0)
        );
        assert_eq!(b.fill, "#000000");
    }

    #[test]
    fn text_this_reader_does_not_know_stays_in_the_svg() {
        for odd in [
            "<text x=\"1\" y=\"1\" font-size=\"10\" font-weight=\"bold\">A</text>",
            "<text x=\"1\" y=\"1\" font-size=\"10\" transform=\"scale(2)\">A</text>",
            "<text x=\"1\" y=\"1\" font-size=\"10\" opacity=\"0.5\">A</text>",
            "<text x=\"1\" y=\"1\" font-size=\"10\"><tspan>A</tspan></text>",
            "<text x=\"1\" y=\"1\"</text>",
        ] {
            let (rest, labels) = split(odd);
            assert_eq!(rest, odd);
            assert!(labels.is_empty());
        }
        assert_eq!(
            unescape("a &amp; &#x3a9; &#937;").as_deref(),
            Some("a & Ω Ω")
        );
    }
}
