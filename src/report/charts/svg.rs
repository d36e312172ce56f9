//! A tiny SVG writer: elements with attributes, text escaped for XML, and
//! numbers written with a fixed number of decimals so that the same data
//! always gives byte-identical output.

/// An attribute value: numbers are written with one decimal place.
pub(crate) enum Val<'a> {
    Num(f64),
    Str(&'a str),
    Own(String),
}

impl From<f64> for Val<'_> {
    fn from(v: f64) -> Self {
        Val::Num(v)
    }
}
impl<'a> From<&'a str> for Val<'a> {
    fn from(v: &'a str) -> Self {
        Val::Str(v)
    }
}
impl<'a> From<&'a String> for Val<'a> {
    fn from(v: &'a String) -> Self {
        Val::Str(v)
    }
}
impl From<String> for Val<'_> {
    fn from(v: String) -> Self {
        Val::Own(v)
    }
}

/// `attrs!{"x" => 1.0, "class" => "bar"}` builds an attribute slice.
macro_rules! attrs {
    ($($k:expr => $v:expr),* $(,)?) => {
        &[$(($k, $crate::report::charts::svg::Val::from($v))),*]
    };
}
pub(crate) use attrs;

/// `v` with `decimals` places; never "-0.0", and a non-finite value (which
/// callers filter out before drawing) becomes 0 rather than "NaN" in the markup.
pub(crate) fn fixed(v: f64, decimals: usize) -> String {
    let v = if v.is_finite() { v } else { 0.0 };
    let s = format!("{v:.decimals$}");
    if s.starts_with('-') && s[1..].chars().all(|c| c == '0' || c == '.') {
        s[1..].to_string()
    } else {
        s
    }
}

/// Escapes the five XML specials and drops characters XML 1.0 forbids, so any
/// label a user typed still gives a well-formed document.
pub(crate) fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '&' => out.push_str("&amp;"),
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            '\t' | '\n' | '\r' => out.push(' '),
            c if (c as u32) < 0x20 || c == '\u{FFFE}' || c == '\u{FFFF}' => {}
            c => out.push(c),
        }
    }
    out
}

/// Writes one element per line, indented by nesting depth, so snapshots diff well.
#[derive(Default)]
pub(crate) struct Svg {
    buf: String,
    depth: usize,
}

impl Svg {
    fn start_tag(&mut self, name: &str, attrs: &[(&str, Val)]) {
        for _ in 0..self.depth {
            self.buf.push_str("  ");
        }
        self.buf.push('<');
        self.buf.push_str(name);
        for (k, v) in attrs {
            self.buf.push(' ');
            self.buf.push_str(k);
            self.buf.push_str("=\"");
            match v {
                Val::Num(n) => self.buf.push_str(&fixed(*n, 1)),
                Val::Str(s) => self.buf.push_str(&escape(s)),
                Val::Own(s) => self.buf.push_str(&escape(s)),
            }
            self.buf.push('"');
        }
    }

    /// `<name …>`; pair with [`Svg::close`].
    pub fn open(&mut self, name: &str, attrs: &[(&str, Val)]) {
        self.start_tag(name, attrs);
        self.buf.push_str(">\n");
        self.depth += 1;
    }

    /// `</name>`.
    pub fn close(&mut self, name: &str) {
        self.depth = self.depth.saturating_sub(1);
        for _ in 0..self.depth {
            self.buf.push_str("  ");
        }
        self.buf.push_str("</");
        self.buf.push_str(name);
        self.buf.push_str(">\n");
    }

    /// `<name …/>`.
    pub fn empty(&mut self, name: &str, attrs: &[(&str, Val)]) {
        self.start_tag(name, attrs);
        self.buf.push_str("/>\n");
    }

    /// `<name …>text</name>` with the text escaped.
    pub fn text(&mut self, name: &str, attrs: &[(&str, Val)], content: &str) {
        self.start_tag(name, attrs);
        self.buf.push('>');
        self.buf.push_str(&escape(content));
        self.buf.push_str("</");
        self.buf.push_str(name);
        self.buf.push_str(">\n");
    }

    /// The markup written so far.
    pub fn finish(self) -> String {
        self.buf
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn escapes_the_five_xml_specials() {
        // XML 1.0 §2.4 and §4.6 (published): the predefined entities.
        assert_eq!(escape(r#"a&b<c>d"e'f"#), "a&amp;b&lt;c&gt;d&quot;e&apos;f");
    }

    #[test]
    fn drops_characters_xml_forbids() {
        // XML 1.0 §2.2 Char production (published): U+0000–U+001F other than tab, LF, CR are not allowed.
        assert_eq!(escape("a\u{0}b\u{1b}c"), "abc");
    }

    #[test]
    fn fixed_never_writes_negative_zero() {
        assert_eq!(fixed(-0.04, 1), "0.0");
        assert_eq!(fixed(-0.06, 1), "-0.1");
        assert_eq!(fixed(f64::NAN, 1), "0.0");
    }

    #[test]
    fn elements_nest_and_escape_attributes() {
        let mut s = Svg::default();
        s.open("g", attrs! {"class" => "a\"b"});
        s.empty("rect", attrs! {"x" => 1.26});
        s.text("text", attrs! {}, "<hi>");
        s.close("g");
        let out = s.finish();
        assert_eq!(
            out,
            "<g class=\"a&quot;b\">\n  <rect x=\"1.3\"/>\n  <text>&lt;hi&gt;</text>\n</g>\n"
        );
    }
}
