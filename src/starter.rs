//! The starter notebook written by `benchrec new`: invented values, builds as it stands.

/// Starter text; `{record}` and `{date}` are filled in by [`starter`].
const STARTER: &str = r#"---
record: {record}
title: Capacitor check (starter notebook, replace with yours)
date: {date}
operator: your name
lab: your lab
decision: guarded
coverage: 0.9545
instruments:
  meter:
    what: true-RMS multimeter, AC volts
    accuracy: 0.5% + 3
    resolution: 1 mV
    bandwidth: 20 kHz
    calibrated: 2026-01-05
    due: 2027-01-05
parts:
  Rs:
    kind: resistor
    nominal: 2.2 kohm
    tolerance: 1%
    rating: 0.25 W
  Cx:
    kind: capacitor
    nominal: 68 nF
    tolerance: 10%
    rating: 100 V
---

# Capacitor check

*The readings below are invented placeholders: replace them with your own.*

Write what you are measuring and why, how the parts are connected and what you expect.
Each fenced `readings` block is reduced where it stands; cite a result in the text with
inline code starting with `=`, for example `=cx-sweep.C`.

```readings
id: cx-sweep
network: RC
parts: [Rs, Cx]
meter: meter
note: Cx in series with Rs, generator at 1.5 V RMS
---
f/Hz    Vs/V    VR/V    VC/V
400     1.500   0.528   1.404
800     1.500   0.902   1.199
1600    1.500   1.249   0.831
```

Close with what the numbers mean for the part and what you would do next.
"#;

/// A starter notebook for `record` dated `date` (ISO 8601).
pub fn starter(record: &str, date: &str) -> String {
    let clean: String = record
        .chars()
        .filter(|c| c.is_alphanumeric() || matches!(c, '-' | '_' | '.'))
        .collect();
    let record = if clean.is_empty() {
        "NEW-0001".to_string()
    } else {
        clean
    };
    STARTER.replace("{record}", &record).replace("{date}", date)
}
