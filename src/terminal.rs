//! How the command line talks: results on standard output; status lines (built, up to date,
//! signed, watching) on standard error, silenced by `-q`; colour only where it helps and only
//! on a terminal, unless `--color always`, and never with `NO_COLOR` set (no-color.org).

use clap::ValueEnum;
use std::io::IsTerminal;
use std::sync::OnceLock;

#[derive(Clone, Copy, Debug, PartialEq, Eq, ValueEnum)]
pub enum ColorWhen {
    Auto,
    Always,
    Never,
}

struct Style {
    quiet: bool,
    /// Colour on standard output, on standard error.
    out: bool,
    err: bool,
}

static STYLE: OnceLock<Style> = OnceLock::new();

/// Sets the style once, from the global options and the environment.
pub fn init(quiet: bool, when: ColorWhen) {
    let no_color = std::env::var_os("NO_COLOR").is_some_and(|v| !v.is_empty());
    let on = |tty: bool| match when {
        ColorWhen::Always => true,
        ColorWhen::Never => false,
        ColorWhen::Auto => tty && !no_color,
    };
    let _ = STYLE.set(Style {
        quiet,
        out: on(std::io::stdout().is_terminal()),
        err: on(std::io::stderr().is_terminal()),
    });
}

fn style() -> &'static Style {
    STYLE.get_or_init(|| Style {
        quiet: false,
        out: false,
        err: false,
    })
}

pub fn quiet() -> bool {
    style().quiet
}

/// What a coloured word says.
#[derive(Clone, Copy)]
pub enum Tone {
    Bad,
    Warn,
    Good,
}

fn paint_if(on: bool, text: &str, tone: Tone) -> String {
    if !on {
        return text.to_string();
    }
    let code = match tone {
        Tone::Bad => "1;31",
        Tone::Warn => "1;33",
        Tone::Good => "32",
    };
    format!("\x1b[{code}m{text}\x1b[0m")
}

/// `text` coloured for standard output.
pub fn paint(text: &str, tone: Tone) -> String {
    paint_if(style().out, text, tone)
}

/// `text` coloured for standard error.
pub fn paint_err(text: &str, tone: Tone) -> String {
    paint_if(style().err, text, tone)
}

/// A diagnostic report for standard error, its `error` and `warning` heads coloured.
pub fn report(text: &str) -> String {
    if !style().err {
        return text.to_string();
    }
    text.split_inclusive('\n')
        .map(|line| {
            for (head, tone) in [("error", Tone::Bad), ("warning", Tone::Warn)] {
                if let Some(rest) = line.strip_prefix(head) {
                    if rest.starts_with(':') || rest.starts_with('[') {
                        return format!("{}{rest}", paint_if(true, head, tone));
                    }
                }
            }
            line.to_string()
        })
        .collect()
}

/// `1 block`, `2 blocks`.
pub fn count(n: usize, one: &str, many: &str) -> String {
    benchrec::print::count(n, one, many)
}

/// The one phrase for a path that is not there.
pub fn missing(path: &std::path::Path) -> String {
    format!("{}: no such file or folder", path.display())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn counts_and_colour_codes() {
        assert_eq!(count(1, "block", "blocks"), "1 block");
        assert_eq!(count(0, "block", "blocks"), "0 blocks");
        assert_eq!(paint_if(false, "FAIL", Tone::Bad), "FAIL");
        // ECMA-48 SGR: 1 bold, 31 red, 0 reset.
        assert_eq!(paint_if(true, "FAIL", Tone::Bad), "\x1b[1;31mFAIL\x1b[0m");
    }
}
