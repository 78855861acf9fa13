# Writes the malformed catalogue: each case is the base notebook with one edit; the marker
# ⟦ sits where the error must point; ⟧ fixes only the line (used where the YAML library picks
# the column). Needles are words of that diagnostic's own text, never in the notebook.
import os, sys
# Regenerate with: python3 tests/malformed/make_catalogue.py (from the repository root)
OUT = os.path.join(os.path.dirname(os.path.abspath(__file__)))
FM = """---
record: HX-0001
title: Hardening base notebook
date: 2026-10-05
operator: T. Tester (synthetic)
instruments:
  dmm:
    what: bench meter
    accuracy: 0.5% + 2
    resolution: 0.1 mV
parts:
  R1:
    kind: resistor
    nominal: 2.2 kohm
    tolerance: 1%
  C1:
    kind: capacitor
    nominal: 68 nF
    tolerance: K
---
"""
PROSE = """
A synthetic series pair, readings made up by complex arithmetic.

"""
HEAD = """```readings
id: blk
network: RC
parts: [R1, C1]
meter: dmm
---
"""
TABLE = """f/Hz    VR/V     VC/V
400     0.5279   1.4040
800     0.9015   1.1989
1600    1.2491   0.8305
3200    1.4234   0.4732
"""
TAIL = """```

The block value is `=blk.C`.
"""
BASE = FM + PROSE + HEAD + TABLE + TAIL

cases = []  # (name, text, needle, note)
def case(name, text, needle, note):
    assert ("⟦" in text) != ("⟧" in text), name
    cases.append((name, text, needle, note))
def sub(old, new, src=None, count=1):
    s = BASE if src is None else src
    assert s.count(old) >= 1, old
    return s.replace(old, new, count)

# --- front matter shape
case("fm-yaml-unclosed-flow", sub("title: Hardening base notebook", "title: ⟦[Hardening base notebook"), "never closed", "broken YAML: unclosed flow sequence")
case("fm-yaml-bad-indent", sub("    what: bench meter\n", "    what: bench meter\n ⟧  accuracy 0.5%: : x\n", ), "not valid yaml", "broken YAML: bad indentation")
case("fm-yaml-tab-indent", sub("  dmm:\n    what", "  dmm:\n⟦\twhat"), "spaces, not tabs", "tab used as YAML indentation")
case("fm-not-a-mapping", "⟦---\n- just some words\n- in a list\n---\n" + PROSE + HEAD + TABLE + TAIL, "must be a mapping", "front matter is a list, not a mapping")
case("fm-missing-open", "⟦# A notebook that starts with prose\n" + PROSE + HEAD + TABLE + TAIL, "starts with its front matter", "no --- fence on line 1")
case("fm-unclosed", (FM + PROSE).replace("---\n", "⟦---\n", 1).replace("tolerance: K\n---\n", "tolerance: K\n", 1) + "Prose follows but the header never ends.\n", "never closed", "front matter never closed")
case("fm-duplicate-key", sub("date: 2026-10-05\n", "date: 2026-10-05\n⟦title: Again\n"), "appears twice", "a YAML key given twice")
case("fm-deep-nesting", sub("operator: T. Tester (synthetic)\n", "operator: T. Tester (synthetic)\nlab: " + "[" * 4999 + "⟦[" + "]" * 5000 + "\n"), "too deeply", "deeply nested YAML on one line")
laughs = "lab: [&a [lol, lol, lol, lol, lol, lol, lol, lol, lol], " + ", ".join(
    f"&{chr(ord('b')+i)} [" + ", ".join([f"*{chr(ord('a')+i)}"] * 9) + "]" for i in range(8)) + "]"
case("fm-billion-laughs", sub("operator: T. Tester (synthetic)\n", "operator: T. Tester (synthetic)\n" + laughs.replace("*", "⟦*", 1) + "\n"), "expands aliases too often", "YAML anchors expanding exponentially")
# --- required keys: the error points at the opening fence (line 1, col 1)
case("fm-missing-record", sub("---\nrecord: HX-0001\n", "⟦---\n", ), "lacks `record`", "required key record missing")
case("fm-missing-title", sub("---\nrecord: HX-0001\ntitle: Hardening base notebook\n", "⟦---\nrecord: HX-0001\n"), "lacks `title`", "required key title missing")
case("fm-missing-date", sub("---\nrecord: HX-0001\n", "⟦---\nrecord: HX-0001\n").replace("date: 2026-10-05\n", ""), "lacks `date`", "required key date missing")
case("fm-missing-operator", sub("---\nrecord: HX-0001\n", "⟦---\nrecord: HX-0001\n").replace("operator: T. Tester (synthetic)\n", ""), "lacks `operator`", "required key operator missing")
case("fm-date-impossible", sub("date: 2026-10-05", "date: ⟦2026-13-45"), "is not a date", "a date that is not a date")
case("fm-date-words", sub("date: 2026-10-05", "date: ⟦last tuesday"), "is not a date", "a date in words")
case("fm-coverage-out-of-range", sub("operator: T. Tester (synthetic)\n", "operator: T. Tester (synthetic)\ncoverage: ⟦1.5\n"), "between 0 and 1", "coverage probability above 1")
case("fm-coverage-inf", sub("operator: T. Tester (synthetic)\n", "operator: T. Tester (synthetic)\ncoverage: ⟦.inf\n"), "between 0 and 1", "coverage written as YAML infinity")
case("fm-decision-unknown", sub("operator: T. Tester (synthetic)\n", "operator: T. Tester (synthetic)\ndecision: ⟦lenient\n"), "unknown decision rule", "unknown decision rule")
case("fm-instrument-due-not-date", sub("    resolution: 0.1 mV\n", "    resolution: 0.1 mV\n    due: ⟦soon\n"), "is not a date", "instrument due date not a date")
case("fm-accuracy-garbled", sub("accuracy: 0.5% + 2", "accuracy: ⟦about half a percent"), "percent of reading plus N counts", "accuracy not in P% + N form")
case("fm-resolution-unit-unknown", sub("resolution: 0.1 mV", "resolution: 0.1 ⟦mQ"), "unknown unit", "unknown unit in an instrument")
case("fm-part-kind-unknown", sub("kind: capacitor", "kind: ⟦diode"), "unknown part kind", "part kind not resistor/capacitor/inductor")
case("fm-nominal-wrong-dimension", sub("nominal: 68 nF", "nominal: ⟦68 nH"), "in farads", "capacitor nominal in henry")
case("fm-nominal-nan", sub("nominal: 2.2 kohm", "nominal: ⟦NaN ohm"), "not a finite number", "NaN written out in the front matter")
case("fm-nominal-zero-resistance", sub("nominal: 2.2 kohm", "nominal: ⟦0 ohm"), "greater than zero", "a zero resistance")
case("fm-tolerance-code-unknown", sub("tolerance: K", "tolerance: ⟦Q"), "not an IEC 60062 tolerance letter", "IEC 60062 code that does not exist")
case("fm-tolerance-code-E", sub("tolerance: K", "tolerance: ⟦E"), "not an IEC 60062 tolerance letter", "letter E is not in the FORMAT list")
case("fm-tolerance-negative", sub("tolerance: 1%", "tolerance: ⟦-1%"), "a positive percentage", "a negative tolerance")
case("fm-measured-by-undefined", sub("    tolerance: 1%\n", "    tolerance: 1%\n    measured: 2.19 kohm\n    by: ⟦megger\n"), "is not defined", "part measured by an instrument not defined")
# --- readings block header
case("blk-network-unknown", sub("network: RC", "network: ⟦RCX"), "unknown network", "unknown network")
case("blk-network-missing", sub("```readings\nid: blk\nnetwork: RC\n", "⟦```readings\nid: blk\n"), "lacks `network`", "no network key")
case("blk-id-missing", sub("```readings\nid: blk\n", "⟦```readings\n"), "lacks `id`", "no id key")
case("blk-header-unknown-key", sub("meter: dmm\n", "meter: dmm\n⟦colour: blue\n"), "unknown key", "unknown readings header key")
case("blk-header-yaml-broken", sub("parts: [R1, C1]", "parts: ⟦[R1, C1"), "never closed", "readings header YAML broken")
case("blk-part-undefined", sub("parts: [R1, C1]", "parts: [R1, ⟦C9]"), "is not defined", "part named but not defined")
case("blk-meter-undefined", sub("meter: dmm", "meter: ⟦dvm"), "is not defined", "instrument named but not defined")
case("blk-source-not-volts", sub("meter: dmm\n", "meter: dmm\nsource: ⟦1.5 Hz\n"), "in volts", "source level in hertz")
case("blk-no-separator", sub("```readings\n", "⟦```readings\n").replace("meter: dmm\n---\n", "meter: dmm\n"), "between header and table", "no --- between block header and table")
case("blk-no-rows", sub(TABLE, "⟦f/Hz    VR/V     VC/V\n"), "no rows", "a readings block with no rows")
case("blk-duplicate-id", BASE + "\nA second block with the same id.\n\n" + HEAD.replace("id: blk", "id: ⟦blk") + TABLE + "```\n", "used twice", "duplicate block ids")
# --- columns
case("col-missing-VC", sub(TABLE, TABLE.replace("f/Hz    VR/V     VC/V", "⟦f/Hz    VR/V").replace("   1.4040", "").replace("   1.1989", "").replace("   0.8305", "").replace("   0.4732", "")), "lacks column `VC`", "RC block without its VC column")
case("col-duplicate", sub("f/Hz    VR/V     VC/V", "f/Hz    VR/V     VC/V   ⟦VR/V").replace("1.4040", "1.4040   0.5279").replace("1.1989", "1.1989   0.9015").replace("0.8305", "0.8305   1.2491").replace("0.4732", "0.4732   1.4234"), "appears twice", "a column given twice")
case("col-unknown-symbol", sub("f/Hz    VR/V     VC/V", "f/Hz    VR/V     VC/V   ⟦Vq/V").replace("1.4040", "1.4040   0.1").replace("1.1989", "1.1989   0.1").replace("0.8305", "0.8305   0.1").replace("0.4732", "0.4732   0.1"), "unknown column", "a column symbol that does not exist")
case("col-unit-unknown", sub("f/Hz    VR/V", "f/Hz    VR/⟦Q"), "unknown unit", "unknown unit in a heading")
case("col-prefix-unknown", sub("f/Hz    VR/V", "f/Hz    VR/⟦xV"), "unknown SI prefix", "unknown prefix in a heading")
case("col-wrong-dimension", sub("f/Hz    VR/V", "f/Hz    VR/⟦A"), "cannot be in", "VR column in amperes")
case("col-shift-without-period", sub(TABLE, TABLE.replace("f/Hz    VR/V     VC/V", "f/Hz    VR/V     VC/V     ⟦shift/div").replace("1.4040", "1.4040   1.2").replace("1.1989", "1.1989   1.0").replace("0.8305", "0.8305   0.6").replace("0.4732", "0.4732   0.3")), "needs a `period` column", "shift column without period")
# --- rows and cells
case("row-short", sub("800     0.9015   1.1989", "⟦800     0.9015"), "but the table has 3 columns", "a row with too few cells")
case("row-long", sub("800     0.9015   1.1989", "800     0.9015   1.1989   ⟦0.77"), "but the table has 3 columns", "a row with too many cells")
case("cell-not-a-number", sub("0.9015", "⟦O.9015"), "not a number", "letter O for zero")
case("cell-decimal-comma", sub("0.9015", "0⟦,9015"), "decimal point", "decimal comma in a cell")
case("cell-unit-unknown", sub("0.9015", "0.9015⟦furlong"), "unknown unit", "unknown unit in a cell")
case("cell-prefix-unknown", sub("0.9015", "901.5⟦xV"), "unknown SI prefix", "unknown prefix in a cell")
case("cell-unit-unknown-spaced", sub("800     0.9015", "800     0.9015 ⟦furlong"), "unknown unit", "unknown unit after a space in a whitespace table")
case("cell-prefix-unknown-spaced", sub("800     0.9015", "800     901.5 ⟦xV"), "unknown SI prefix", "unknown prefix after a space in a whitespace table")
case("cell-wrong-dimension", sub("0.9015", "901.5 ⟦mA"), "in volts", "a current in a voltage column")
case("cell-nan", sub("0.9015", "⟦NaN"), "not a finite number", "NaN written out in a cell")
case("cell-inf", sub("0.9015", "⟦inf"), "not a finite number", "inf written out in a cell")
case("cell-infinity-negative", sub("1.1989", "⟦-Infinity"), "not a finite number", "-Infinity written out in a cell")
case("cell-out-of-range", sub("0.9015", "⟦1e999"), "number out of range", "a number beyond f64")
case("cell-frequency-negative", sub("800     0.9015", "⟦-800    0.9015"), "greater than zero", "negative frequency")
case("cell-frequency-zero", sub("800     0.9015", "⟦0       0.9015"), "greater than zero", "zero frequency")
# --- meter ranges (FORMAT.md 1.1)
RES = "    resolution: 0.1 mV\n"
def ranged(line, src=None):
    return sub(RES, RES + line, src)
case("fm-range-no-unit", ranged("    ranges: [⟦2, 20 V]\n"), "not a quantity with a unit", "a range without its unit")
case("fm-range-negative", ranged("    ranges: [⟦-2 V, 20 V]\n"), "must be greater than zero", "a negative range")
case("fm-range-twice", ranged("    ranges: [2 V, ⟦2000 mV]\n"), "listed twice", "one range given twice, in two spellings")
case("fm-range-garbled", ranged("    ranges: [2 V, 20 ⟦Vx]\n"), "unknown unit", "a range in a unit that does not exist")
case("fm-ranges-not-a-list", ranged("    ranges: ⟦{2 V: 20 V}\n"), "must be a list", "ranges written as a mapping")
case("fm-accuracy-range-unlisted", sub("accuracy: 0.5% + 2", "accuracy: { 2 V: 0.5% + 2, ⟦5 V: 1% + 3 }", ranged("    ranges: [2 V]\n")), "does not list", "accuracy for a range the meter does not list")
case("fm-accuracy-range-missing", sub("accuracy: 0.5% + 2", "⟦accuracy: { 2 V: 0.5% + 2 }", ranged("    ranges: [2 V, 20 V]\n")), "gives nothing for", "a listed range with no accuracy in the map")
case("fm-accuracy-range-no-ranges", sub("accuracy: 0.5% + 2", "accuracy: { ⟦2 V: 0.5% + 2 }"), "does not list", "accuracy per range without `ranges`")
case("col-range-not-listed", sub("f/Hz    VR/V     VC/V", "f/Hz    VR/V     VC/V@⟦5V", ranged("    ranges: [2 V, 20 V]\n")), "does not list", "heading names a range the meter does not list")
case("col-range-wrong-dimension", sub("f/Hz    VR/V     VC/V", "f/Hz    VR/V     VC/V@⟦2mA", ranged("    ranges: [2 V, 20 V]\n")), "is not in volts", "heading names a current range for a voltage column")
case("col-range-empty", sub("f/Hz    VR/V     VC/V", "f/Hz    VR/V     ⟦VC/V@", ranged("    ranges: [2 V, 20 V]\n")), "names no range", "an @ with nothing after it")
case("col-range-huge", sub("f/Hz    VR/V     VC/V", "f/Hz    VR/V     VC/V@⟦1e999V", ranged("    ranges: [2 V, 20 V]\n")), "out of range", "a heading range beyond f64")
case("col-meter-no-range-in-volts", sub("f/Hz    VR/V     VC/V", "f/Hz    ⟦VR/V     VC/V", ranged("    ranges: [200 mA, 2 A]\n")), "but none in volts", "a meter whose ranges are all currents, reading volts")
case("cell-over-range", sub("1.4040", "⟦2.4040", ranged("    ranges: [200 mV, 2 V]\n")), "over range", "a reading above the largest range")
case("cell-over-named-range", sub("1.4040", "⟦1.4040", sub("f/Hz    VR/V     VC/V", "f/Hz    VR/V     VC/V@200mV", ranged("    ranges: [200 mV, 2 V]\n"))), "over range", "a reading above the range its heading names")
# --- loss limits and the three-ammeter columns
case("fm-max-d-negative", sub("tolerance: K\n", "tolerance: K\n    max_D: ⟦-2%\n"), "must be greater than zero", "a negative dissipation factor limit")
case("fm-max-d-wrong-unit", sub("tolerance: K\n", "tolerance: K\n    max_D: ⟦2 ohm\n"), "has the wrong unit", "max_D given in ohms")
case("fm-max-esr-bare", sub("tolerance: K\n", "tolerance: K\n    max_esr: ⟦3\n"), "needs a unit", "max_esr as a bare number")
case("fm-max-esr-on-resistor", sub("tolerance: 1%\n", "tolerance: 1%\n    ⟦max_esr: 1 ohm\n"), "applies only to a capacitor", "a loss limit on a resistor")
PAR_HEAD = HEAD.replace("network: RC", "network: RCparallel")
PAR_TABLE = """f/Hz    V/V     I/mA      IR/mA     IC/mA
500     5.000   17.1204   15.1515   7.3886
1000    5.000   21.3688   15.1515   14.7684
"""
PAR = FM + PROSE + PAR_HEAD + PAR_TABLE + TAIL
case("col-par-missing-IC", sub(PAR_TABLE, "⟦" + PAR_TABLE.replace("     IC/mA", "").replace("   7.3886", "").replace("   14.7684", ""), PAR), "lacks column `IC`", "RCparallel block without its IC column")
case("cell-par-negative-IR", sub("15.1515   7.3886", "⟦-15.1515   7.3886", PAR), "cannot be negative", "a negative branch current")
case("col-par-IC-in-volts", sub("IC/mA", "IC/⟦V", PAR), "cannot be in", "a branch current column in volts")
# --- numbers beyond what can be computed, and fences the Markdown reader would hide
case("cell-frequency-subnormal", sub("800     0.9015", "⟦1e-320  0.9015"), "too small to compute", "a subnormal frequency, 1e-320 Hz")
case("cell-voltage-absurd", sub("1.1989", "⟦1e300"), "too large to compute", "VC = 1e300 V")
case("fence-inside-html", sub("```readings\n", "<details>\n⟦```readings\n").replace("The block value is `=blk.C`.", "</details>"), "inside an HTML block", "a readings fence right under <details>")
case("fence-wrong-case", sub("```readings\n", "⟦```Readings\n").replace("The block value is `=blk.C`.", ""), "case-sensitive", "the label Readings, capital R")
case("fence-misspelt", sub("```readings\n", "⟦```reading\n").replace("The block value is `=blk.C`.", ""), "misspelt", "the label reading, without s")
case("fence-indented-four", (FM + PROSE + "".join("    " + l + "\n" for l in (HEAD + TABLE + "```").split("\n"))).replace("    ```readings", "    ⟦```readings", 1), "indented four or more", "a readings block indented as code")
# --- prose
case("prose-cite-missing-block", sub("The block value is `=blk.C`.", "The block value is ⟦`=nope.C`."), "no readings block `nope`", "citation of a block that does not exist")
case("prose-cite-missing-result", sub("The block value is `=blk.C`.", "The block value is ⟦`=blk.Zq`."), "has no block result `Zq`", "citation of a result that does not exist")
case("prose-image-parent", sub("The block value is", "⟦![scope trace](../x.png)\n\nThe block value is"), "points outside the notebook's folder", "image ../x.png outside the folder")
case("prose-image-absolute", sub("The block value is", "⟦![password file](/etc/passwd)\n\nThe block value is"), "points outside the notebook's folder", "image /etc/passwd, an absolute path")
case("prose-image-missing", sub("The block value is", "⟦![trace](trace-not-here.png)\n\nThe block value is"), "does not exist", "image that does not exist")
case("fm-template-outside", sub("operator: T. Tester (synthetic)\n", "operator: T. Tester (synthetic)\ntemplate: ⟦../elsewhere.typ\n"), "points outside the notebook's folder", "template path outside the folder")

# --- lots (FORMAT.md 1.1): unit_of and the unit column
LOT_TABLE = """unit  f/Hz    VR/V     VC/V
A1    400     0.5279   1.4040
A1    800     0.9015   1.1989
A2    1600    1.2491   0.8305
A2    3200    1.4234   0.4732
"""
LOT = FM + PROSE + HEAD.replace("meter: dmm\n", "meter: dmm\nunit_of: C1\n") + LOT_TABLE + TAIL
case("lot-unit-of-undefined", sub("unit_of: C1", "unit_of: ⟦C7", LOT), "is not defined", "unit_of names no part")
case("lot-unit-of-wrong-kind", sub("unit_of: C1", "unit_of: ⟦R1", LOT), "judges no resistor", "unit_of names a resistor in an RC block")
case("lot-unit-of-not-in-parts", sub("unit_of: C1", "unit_of: ⟦C1", LOT).replace("parts: [R1, C1]", "parts: [R1]"), "not among the block's parts", "unit_of names a part the block does not list")
case("lot-unit-column-alone", sub("unit_of: C1\n", "", LOT).replace("unit  f/Hz", "⟦unit  f/Hz"), "needs `unit_of`", "a unit column without unit_of")
case("lot-unit-of-alone", FM + PROSE + HEAD.replace("meter: dmm\n", "meter: dmm\nunit_of: ⟦C1\n") + TABLE + TAIL, "needs a `unit` column", "unit_of without a unit column")
PIPE = """| unit | f/Hz | VR/V | VC/V |
|---|---|---|---|
| A1 | 400 | 0.5279 | 1.4040 |
|    ⟦| 800 | 0.9015 | 1.1989 |
"""
case("lot-empty-serial", FM + PROSE + HEAD.replace("meter: dmm\n", "meter: dmm\nunit_of: C1\n") + PIPE + TAIL, "empty serial", "a row with no serial")
case("lot-unit-column-twice", sub("unit  f/Hz    VR/V     VC/V", "unit  f/Hz    VR/V     VC/V  ⟦unit", LOT).replace("0.4732\n", "0.4732 A2\n").replace("1.4040\n", "1.4040 A1\n").replace("1.1989\n", "1.1989 A1\n").replace("0.8305\n", "0.8305 A2\n"), "appears twice", "two unit columns")

# --- readings from a file (FORMAT.md 1.1): `table:`. A case with a table file has the file
# beside it (same name, .csv) and the marker in the file when the error must point there.
# --- a measurement model written in the notebook (network: model)
def mdl(expr, unit="F"):
    return sub("network: RC\n", 'network: model\nmodel:\n  C: { expr: "' + expr + '", unit: ' + unit + ' }\n')
case("mdl-unknown-name", mdl("VR / (2*pi*f*⟦Rx*VC)"), "no name an expression may use", "a model naming what is neither a column, a part nor pi")
case("mdl-unknown-function", mdl("⟦cosh(VR) * 1e-9"), "not a function an expression may call", "a model calling a function not on the list")
case("mdl-bad-character", mdl("VR ⟦; VC"), "has no meaning in an expression", "a character no expression uses")
case("mdl-braced-name", mdl("⟦{VR} * 1e-9"), "has no meaning in an expression", "a braced variable name")
case("mdl-function-bare", mdl("VR + ⟦sin"), "needs its argument", "a function named without its argument")
case("mdl-too-deep", mdl("(" * 32 + "⟦(" + "VR" + ")" * 33), "nests too deeply", "parentheses nested beyond the bound")
case("mdl-too-long", mdl("VR" + " + VR" * 500).replace("  C: {", "⟧  C: {"), "expression is too long", "an expression beyond the length bound")
case("mdl-unbalanced", mdl("(VR").replace("  C: {", "⟧  C: {"), "could not be read", "an unbalanced parenthesis")
case("mdl-operator-run", mdl("VR * / VC").replace("  C: {", "⟧  C: {"), "could not be read", "two operators in a row")
case("mdl-empty", mdl("").replace("  C: {", "⟧  C: {"), "is empty|must not be empty", "an empty expression")
case("mdl-unit-unknown", mdl("VR / (2*pi*f*R1*VC)", "⟦nF"), "not a unit a model result may have", "a prefixed unit word")
case("mdl-unit-dimension", mdl("VR / VC", "⟦F"), "not that of its unit", "a unit the expression cannot have (a pure number as farads)")
case("mdl-dimension-clash", mdl("⟦VR + R1"), "adds V and", "volts added to ohms in an expression")
case("mdl-missing-model", sub("```readings\nid: blk\nnetwork: RC\n", "⟦```readings\nid: blk\nnetwork: model\n"), "needs `model`", "network model without its model")
case("mdl-model-on-rc", sub("network: RC\n", 'network: RC\n⟦model:\n  C: { expr: "VR", unit: F }\n'), "applies only to a block with", "a model on a built-in network")
case("mdl-column-absent", mdl("VR / (2*pi*f*R1*⟦VL)"), "not in this block's table", "a model reading a column the table lacks")
case("mdl-division-by-zero", sub("800     0.9015", "⟦800     0.9015", mdl("VR / (2*pi*f*R1*(VC - 1.1989))")), "not a finite number", "a model dividing by zero at one reading")
csv_cases = []  # (name, notebook text, table text, needle, note)
TABLE_CSV = """f/Hz,VR/V,VC/V
400,0.5279,1.4040
800,0.9015,1.1989
1600,1.2491,0.8305
3200,1.4234,0.4732
"""
def file_head(name, extra=""):
    return HEAD.replace("meter: dmm\n---\n", "meter: dmm\ntable: " + name + ".csv\n" + extra)
def csvcase(name, table, needle, note, extra="", nb=None):
    text = nb if nb is not None else FM + PROSE + file_head(name, extra) + TAIL
    assert (("⟦" in text) + ("⟦" in table)) == 1, name
    csv_cases.append((name, text, table, needle, note))
def tsub(old, new, src=TABLE_CSV):
    assert old in src, old
    return src.replace(old, new, 1)
csvcase("tbl-ragged-row", tsub("800,0.9015,1.1989", "800,0.9015,1.1989,⟦0.77"), "but the header row has 3", "a row of the table file with a field too many")
csvcase("tbl-not-a-number", tsub("0.9015", "⟦O.9015"), "not a number", "letter O for zero in the table file")
csvcase("tbl-decimal-comma", tsub("800;0.9015", "800;0⟦,9015", TABLE_CSV.replace(",", ";")), "decimal comma", "a decimal comma in a file read with decimal: point", extra='delimiter: ";"\n')
csvcase("tbl-decimal-point", tsub("800;0,9015", "800;0⟦.9015", TABLE_CSV.replace(",", ";").replace(".", ",")), "decimal point", "a decimal point in a file read with decimal: comma", extra='delimiter: ";"\ndecimal: comma\n')
csvcase("tbl-missing-mapped-column", tsub("f/Hz,VR/V,VC/V", "⟦Freq,CH1 RMS,CH3 RMS"), "has no column", "columns names a header the file lacks", extra='columns:\n  f/Hz: Freq\n  VR/V: CH1 RMS\n  VC/V: "CH2 RMS"\n')
csvcase("tbl-missing-required", "⟦f/Hz,VR/V\n400,0.5279\n800,0.9015\n", "lacks column `VC`", "an RC table file without its VC column")
csvcase("tbl-heading-unit-unknown", tsub("f/Hz,VR/V", "f/Hz,VR/⟦Q"), "unknown unit", "an unknown unit in the file's header row")
csvcase("tbl-bom-crlf-skip", "\ufeffexported by the bench PC\r\nf/Hz;VR/V;VC/V\r\n400;0,5279;1,4040\r\n800;0,9015;⟦x\r\n\r\n", "not a number", "BOM, CRLF, a skipped line and a trailing empty line; the error still at its line and column", extra='delimiter: ";"\ndecimal: comma\nskip: 1\n')
csvcase("tbl-quoted-bad", tsub("1600,1.2491", "1600,\"1.2491 ⟦mA\""), "in volts", "a quoted field in a unit the column cannot take")
csvcase("tbl-empty-file", "⟦", "is empty", "an empty table file")
csvcase("tbl-range-not-listed", tsub("f/Hz,VR/V,VC/V", "f/Hz,VR/V,VC/V@⟦5V"), "does not list", "a heading in the file names a range the meter does not list", nb=ranged("    ranges: [2 V, 20 V]\n", FM + PROSE + file_head("tbl-range-not-listed") + TAIL))
# Errors in the notebook's header keys.
case("tbl-delimiter-bad", FM + PROSE + file_head("tbl-any", 'delimiter: ⟦"|"\n') + TAIL, "not a separator", "delimiter | is not offered")
case("tbl-decimal-bad", FM + PROSE + file_head("tbl-any", "decimal: ⟦dot\n") + TAIL, "names no decimal separator", "decimal: dot")
case("tbl-skip-bad", FM + PROSE + file_head("tbl-any", "skip: ⟦-1\n") + TAIL, "count of lines", "a negative skip")
case("tbl-key-without-table", sub("meter: dmm\n", "meter: dmm\n⟦skip: 2\n"), "applies only to a table read from a file", "skip in a block typed in the notebook")
case("tbl-fence-has-rows", sub("meter: dmm\n---\nf/Hz    VR/V     VC/V\n", "meter: dmm\ntable: tbl-any.csv\n---\n⟦f/Hz    VR/V     VC/V\n"), "holds no table", "table: and rows in the fence as well")
case("tbl-outside", FM + PROSE + file_head("tbl-any").replace("table: tbl-any.csv", "table: ⟦../x.csv") + TAIL, "points outside the notebook's folder", "a table file outside the folder")
case("tbl-missing-file", FM + PROSE + file_head("tbl-any").replace("table: tbl-any.csv", "table: ⟦not-here.csv") + TAIL, "does not exist", "a table file that does not exist")
for f in os.listdir(OUT):
    if (f.endswith(".md") or f.endswith(".csv")) and not f.startswith("ok-"):
        os.remove(os.path.join(OUT, f))
rows = []
for name, text, needle, note in cases:
    lineonly = "⟧" in text
    i = text.index("⟧" if lineonly else "⟦")
    clean = text.replace("⟧", "", 1) if lineonly else text.replace("⟦", "", 1)
    before = clean[:i]
    line = before.count("\n") + 1
    col = len(before) - (before.rfind("\n") + 1) + 1
    fn = name + ".md"
    with open(os.path.join(OUT, fn), "w", encoding="utf-8", newline="") as fh:
        fh.write(clean)
    for alt in needle.split("|"):
        assert alt.lower() not in clean.lower(), (name, alt)
    rows.append(f"{fn}\t{line}\t{'-' if lineonly else col}\t{needle}\t{note}")
for name, text, table, needle, note in csv_cases:
    marked = table if "⟦" in table else text
    i = marked.index("⟦")
    before = marked[:i].lstrip("\ufeff")
    line = before.count("\n") + 1
    col = len(before) - (before.rfind("\n") + 1) + 1
    with open(os.path.join(OUT, name + ".md"), "w", encoding="utf-8", newline="") as fh:
        fh.write(text.replace("⟦", ""))
    with open(os.path.join(OUT, name + ".csv"), "w", encoding="utf-8", newline="") as fh:
        fh.write(table.replace("⟦", ""))
    for alt in needle.split("|"):
        assert alt.lower() not in (text + table).lower(), (name, alt)
    where = name + ".csv" if "⟦" in table else "-"
    rows.append(f"{name}.md\t{line}\t{col}\t{needle}\t{note}\t{where}")
# non-UTF-8 bytes in prose: 0xff at line 23 col 3
raw = BASE.replace("A synthetic series pair", "A \x00synthetic series pair").encode()
raw = raw.replace(b"\x00", b"\xff")
open(os.path.join(OUT, "enc-not-utf8.md"), "wb").write(raw)
pre = BASE[:BASE.index("A synthetic")]
rows.append(f"enc-not-utf8.md\t{pre.count(chr(10))+1}\t3\tnot valid UTF-8\tbyte 0xff in the prose")
with open(os.path.join(OUT, "EXPECT.tsv"), "w") as fh:
    fh.write("# file\tline\tcol\tmessage must contain (any of, |-separated, case-insensitive)\twhat is wrong\t[file the location is in, when not the notebook; the case's table file beside it]\n")
    fh.write("\n".join(rows) + "\n")
    fh.write("@huge-line.md\t32\t9\tnumber out of range\ta 10 MB cell of digits, generated by the test (huge_line_notebook)\n")
with open(os.path.join(OUT, "ok-minimal.md"), "w") as fh:
    fh.write(BASE)
print(len(rows) + 1, "cases")
