//! The man page: clap's name, synopsis and options, then every command with its arguments
//! in this one page (it names no other page), the notebook format in brief, exit status,
//! environment and examples. Roff escaping is the roff crate's.

use clap::Command;
use roff::{bold, italic, roman, Roff};

const FORMAT: &[(&str, &str)] = &[
    (
        "Front matter",
        "YAML between --- lines: record, title, date, operator (required); coverage, decision \
         (simple or guarded, ILAC-G8), instruments (accuracy P% + N counts, resolution, \
         distribution, calibrated, due, bandwidth, ranges), parts (kind, nominal, tolerance as a \
         percentage, a value or an IEC 60062 letter, measured, dcr, rating), template, signoff.",
    ),
    (
        "Readings blocks",
        "A fenced block ```readings: a YAML header (id, network RC, RL, RLC, Z, RCloss, \
         RCparallel, RLparallel, tank or model, parts, meter, phase, counter, source, unit_of), \
         a --- line, then a table whose headings are symbol/unit (f/Hz, VR/V, VC/mV, shift/div, \
         VR/V@2V for a named range; VT/V is the voltage across a tank).",
    ),
    (
        "Prose",
        "Markdown around the blocks is printed in the record; `=block.C` cites a result and \
         `=block.C@1kHz` one frequency's.",
    ),
];

const EXIT: &[(&str, &str)] = &[
    ("0", "Success."),
    (
        "1",
        "A notebook has problems (each reported as file:line:column with what was expected and \
         what was found), a named file or folder does not exist, a record is not valid \
         (verify), or, with check --strict, a record has warnings or a verdict other than pass.",
    ),
    (
        "2",
        "A usage error (an unknown option, a missing argument).",
    ),
];

const EXAMPLES: &[(&str, &str)] = &[
    ("benchrec build lab/notebook.md", "Write lab/notebook.pdf."),
    (
        "benchrec build lab/ -o archive/",
        "Every notebook under lab/, PDFs mirrored under archive/.",
    ),
    (
        "benchrec check -v --strict lab/",
        "Every problem, warning and note; exit 1 on warnings.",
    ),
    (
        "benchrec results a.md b.md --format csv",
        "One CSV table of both, with a path column.",
    ),
    (
        "benchrec sign nb.md --by ana@lab.example --key ~/.ssh/benchrec_ana",
        "Sign with an SSH key (ed25519, no passphrase).",
    ),
    (
        "benchrec verify archive/ --signers allowed_signers",
        "Check every record PDF under archive/.",
    ),
];

fn section(page: &mut Roff, title: &str, items: &[(&str, &str)], bold_head: bool) {
    page.control("SH", [title]);
    for (head, text) in items {
        page.control("TP", []);
        let h = if bold_head { bold(*head) } else { roman(*head) };
        page.text([h]);
        page.text([roman(*text)]);
    }
}

/// The arguments of one command, as `-o, --output <OUTPUT>` and its help.
fn arguments(page: &mut Roff, cmd: &Command) {
    for arg in cmd.get_arguments() {
        if arg.is_hide_set() || ["help", "version"].contains(&arg.get_id().as_str()) {
            continue;
        }
        let mut head = Vec::new();
        if let Some(s) = arg.get_short() {
            head.push(format!("-{s}"));
        }
        if let Some(l) = arg.get_long() {
            head.push(format!("--{l}"));
        }
        let value = arg
            .get_value_names()
            .and_then(|v| v.first())
            .map(|v| v.to_string())
            .unwrap_or_else(|| arg.get_id().as_str().to_uppercase());
        let mut inl = Vec::new();
        if head.is_empty() {
            inl.push(italic(format!("<{value}>")));
        } else {
            inl.push(bold(head.join(", ")));
            if arg.get_action().takes_values() {
                inl.push(roman(" "));
                inl.push(italic(format!("<{value}>")));
            }
        }
        page.control("TP", []);
        page.text(inl);
        let help = arg.get_help().map(|h| h.to_string()).unwrap_or_default();
        page.text([roman(help)]);
    }
}

/// The whole page.
pub fn render(cmd: &Command) -> Result<String, std::io::Error> {
    let man = clap_mangen::Man::new(cmd.clone());
    let mut buf = Vec::new();
    man.render_title(&mut buf)?;
    man.render_name_section(&mut buf)?;
    man.render_synopsis_section(&mut buf)?;
    man.render_description_section(&mut buf)?;
    man.render_options_section(&mut buf)?;
    let mut page = Roff::new();
    page.control("SH", ["COMMANDS"]);
    for sub in cmd.get_subcommands().filter(|s| s.get_name() != "help") {
        page.control("SS", [format!("benchrec {}", sub.get_name()).as_str()]);
        let about = sub.get_about().map(|a| a.to_string()).unwrap_or_default();
        page.text([roman(about)]);
        arguments(&mut page, sub);
    }
    section(&mut page, "NOTEBOOK FORMAT", FORMAT, true);
    section(&mut page, "EXIT STATUS", EXIT, true);
    page.control("SH", ["ENVIRONMENT"]);
    page.control("TP", []);
    page.text([bold("NO_COLOR")]);
    page.text([roman(
        "When set and not empty, no colour (--color auto); see no-color.org.",
    )]);
    section(&mut page, "EXAMPLES", EXAMPLES, true);
    page.to_writer(&mut buf)?;
    man.render_version_section(&mut buf)?;
    Ok(String::from_utf8_lossy(&buf).into_owned())
}
