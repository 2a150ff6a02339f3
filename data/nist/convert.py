#!/usr/bin/env python3
"""Convert the NIST StRD linear least-squares `.dat` files into leastline's
plain-text dataset format (see README.md in this folder).

Usage:
    python3 data/nist/convert.py SOURCE_DIR [OUTPUT_DIR]

SOURCE_DIR must hold the eleven original files (Norris.dat, ..., Wampler5.dat).
OUTPUT_DIR defaults to the folder this script lives in.

Numbers are copied as text. The only changes made to a number are the ones
needed for Rust's `str::parse::<f64>` and for readability:
  * a leading point gets a zero in front:      `.11019`  -> `0.11019`
  * a trailing point gets a zero behind:       `760.`    -> `760.0`
  * a sign directly before a point likewise:   `-.5`     -> `-0.5`
The word `Infinity` (F statistic of the exact fits) is kept as is; Rust
parses it. Nothing is ever re-rounded or re-formatted otherwise.

Only the Python standard library is used.
"""

import os
import re
import sys

NAMES = [
    "Norris", "Pontius", "NoInt1", "NoInt2", "Filip", "Longley",
    "Wampler1", "Wampler2", "Wampler3", "Wampler4", "Wampler5",
]

# A number as it may appear in the originals (Fortran-ish free format).
RAW_NUMBER = re.compile(r"^[+-]?(\d+\.?\d*|\.\d+)([eE][+-]?\d+)?$")
# A number as we write it: digits on both sides of any point.
CLEAN_NUMBER = re.compile(r"^-?\d+(\.\d+)?([eE][+-]?\d+)?$")


class ConvertError(Exception):
    pass


def normalise(token, where):
    """Return `token` as text Rust's f64 parser accepts, without re-rounding."""
    if token == "Infinity":
        return token
    if not RAW_NUMBER.match(token):
        raise ConvertError(f"{where}: not a number: {token!r}")
    sign = ""
    body = token
    if body[0] in "+-":
        sign, body = body[0], body[1:]
    if sign == "+":
        sign = ""
    mantissa, exponent = body, ""
    m = re.search(r"[eE]", body)
    if m:
        mantissa, exponent = body[: m.start()], body[m.start():]
    if mantissa.startswith("."):
        mantissa = "0" + mantissa
    if mantissa.endswith("."):
        mantissa = mantissa + "0"
    out = sign + mantissa + exponent
    if not CLEAN_NUMBER.match(out):
        raise ConvertError(f"{where}: normalisation failed: {token!r} -> {out!r}")
    # Same value, checked with Python's own parser (a guard against slips).
    if float(out) != float(token):
        raise ConvertError(f"{where}: value changed: {token!r} -> {out!r}")
    return out


def read_lines(path):
    # newline="" keeps the CR of the CR LF endings visible; strip it here.
    with open(path, "r", encoding="ascii", newline="") as fh:
        text = fh.read()
    lines = text.split("\n")
    if lines and lines[-1] == "":
        lines.pop()
    return [ln.rstrip("\r").rstrip() for ln in lines]


def find_one(lines, pattern, what, name):
    rx = re.compile(pattern)
    hits = [(i, rx.search(ln)) for i, ln in enumerate(lines)]
    hits = [(i, m) for i, m in hits if m]
    if len(hits) != 1:
        raise ConvertError(f"{name}: expected one line for {what}, found {len(hits)}")
    return hits[0]


def parse_dat(path, name):
    lines = read_lines(path)  # lines[0] is file line 1

    _, m = find_one(lines, r"^Dataset Name:\s+(\S+)", "dataset name", name)
    if m.group(1) != name:
        raise ConvertError(f"{name}: header names the dataset {m.group(1)!r}")

    _, m = find_one(lines, r"Certified Values\s+\(lines (\d+) to (\d+)\)", "certified range", name)
    cert_lo, cert_hi = int(m.group(1)), int(m.group(2))
    _, m = find_one(lines, r"Data\s+\(lines (\d+) to (\d+)\)", "data range", name)
    data_lo, data_hi = int(m.group(1)), int(m.group(2))

    _, m = find_one(lines, r"^\s*(\d+) Predictor Variables?", "predictor count", name)
    predictors = int(m.group(1))
    _, m = find_one(lines, r"^\s*(\d+) Observations", "observation count", name)
    observations = int(m.group(1))
    _, m = find_one(lines, r"^\s*(Lower|Average|Higher) Level of Difficulty", "difficulty", name)
    difficulty = m.group(1).lower()
    _, m = find_one(lines, r"^\s*(Observed|Generated) Data", "data origin", name)
    origin = m.group(1).lower()
    _, m = find_one(lines, r"^\s*(y = .*)$", "model equation", name)
    equation = m.group(1).strip()

    # --- certified block -------------------------------------------------
    cert = lines[cert_lo - 1: cert_hi]
    where = lambda k: f"{name}.dat line {cert_lo + k}"
    params = {}
    residual_sd = r_squared = None
    anova = {}
    after_residual_word = False
    for k, ln in enumerate(cert):
        toks = ln.split()
        if not toks:
            continue
        if re.fullmatch(r"B\d+", toks[0]) and len(toks) == 3:
            idx = int(toks[0][1:])
            if idx in params:
                raise ConvertError(f"{where(k)}: B{idx} given twice")
            params[idx] = (normalise(toks[1], where(k)), normalise(toks[2], where(k)))
        elif toks == ["Residual"]:
            after_residual_word = True
        elif toks[:2] == ["Standard", "Deviation"] and len(toks) == 3:
            if not after_residual_word:
                raise ConvertError(f"{where(k)}: standard deviation line not after 'Residual'")
            residual_sd = normalise(toks[2], where(k))
        elif toks[0] == "R-Squared" and len(toks) == 2:
            r_squared = normalise(toks[1], where(k))
        elif toks[0] == "Regression" and len(toks) == 5:
            anova["df_regression"] = normalise(toks[1], where(k))
            anova["ss_regression"] = normalise(toks[2], where(k))
            anova["ms_regression"] = normalise(toks[3], where(k))
            anova["f_statistic"] = normalise(toks[4], where(k))
        elif toks[0] == "Residual" and len(toks) == 4:
            anova["df_residual"] = normalise(toks[1], where(k))
            anova["ss_residual"] = normalise(toks[2], where(k))
            anova["ms_residual"] = normalise(toks[3], where(k))
    if residual_sd is None or r_squared is None or len(anova) != 7 or not params:
        raise ConvertError(f"{name}: certified block incomplete")

    # --- model ----------------------------------------------------------
    indices = sorted(params)
    intercept = indices[0] == 0
    expected = list(range(0 if intercept else 1, indices[-1] + 1))
    if indices != expected:
        raise ConvertError(f"{name}: parameter indices not contiguous: {indices}")
    slopes = len(indices) - (1 if intercept else 0)
    if ("B0" in equation) != intercept:
        raise ConvertError(f"{name}: equation and parameters disagree on the intercept")
    if predictors == 1:
        kind, order = "polynomial", slopes  # degree
        powers = [int(p) for p in re.findall(r"x\*\*(\d+)", equation)]
        if max(powers, default=1) != order:
            raise ConvertError(f"{name}: equation degree {max(powers, default=1)} != {order}")
    else:
        kind, order = "linear", predictors
        if slopes != predictors:
            raise ConvertError(f"{name}: {slopes} slopes for {predictors} predictors")
    if int(anova["df_regression"]) != slopes:
        raise ConvertError(f"{name}: df_regression {anova['df_regression']} != {slopes}")
    if int(anova["df_residual"]) != observations - len(indices):
        raise ConvertError(f"{name}: df_residual {anova['df_residual']} inconsistent")

    # --- data block -----------------------------------------------------
    rows = []
    for k, ln in enumerate(lines[data_lo - 1: data_hi]):
        toks = ln.split()
        w = f"{name}.dat line {data_lo + k}"
        if len(toks) != 1 + predictors:
            raise ConvertError(f"{w}: expected {1 + predictors} columns, got {len(toks)}")
        rows.append([normalise(t, w) for t in toks])
    if len(rows) != observations:
        raise ConvertError(f"{name}: {len(rows)} data rows, header says {observations}")
    # Whatever lies after the stated range must be blank (Norris has a
    # trailing line of blanks).
    for k, ln in enumerate(lines[data_hi:]):
        if ln.strip():
            raise ConvertError(f"{name}.dat line {data_hi + 1 + k}: data after stated range")
    # The line just before the data must be the column heading.
    if not lines[data_lo - 2].lstrip().startswith("Data:"):
        raise ConvertError(f"{name}: no 'Data:' heading before line {data_lo}")

    return {
        "name": name,
        "kind": kind,
        "order": order,
        "intercept": intercept,
        "observations": observations,
        "difficulty": difficulty,
        "origin": origin,
        "equation": equation,
        "params": [(i, params[i]) for i in indices],
        "residual_sd": residual_sd,
        "r_squared": r_squared,
        "anova": anova,
        "rows": rows,
        "cert_range": (cert_lo, cert_hi),
        "data_range": (data_lo, data_hi),
    }


def render(d):
    name = d["name"]
    out = [
        f"# NIST StRD linear regression dataset {name}",
        "# Source: NIST Information Technology Laboratory, Statistical Reference Datasets (StRD),",
        f"#   linear least squares section, file {name}.dat (US government work, free use). Converted",
        "#   verbatim (numbers copied as text, not re-rounded) by leastline; see data/nist/README.md.",
        f"# Model as printed in the original: {d['equation']}",
        f"# Certified values from lines {d['cert_range'][0]}-{d['cert_range'][1]}, "
        f"data from lines {d['data_range'][0]}-{d['data_range'][1]} of {name}.dat.",
    ]
    if not d["intercept"]:
        out.append("# No intercept: R-squared and the regression sum of squares are uncentered (about zero).")
    out += [
        f"name {name}",
        f"model {d['kind']} {d['order']}",
        f"intercept {'yes' if d['intercept'] else 'no'}",
        f"difficulty {d['difficulty']}",
        f"origin {d['origin']}",
        f"observations {d['observations']}",
    ]
    for i, (est, sd) in d["params"]:
        out.append(f"certified coefficient {i} {est} {sd}")
    out.append(f"certified residual_sd {d['residual_sd']}")
    out.append(f"certified r_squared {d['r_squared']}")
    for key in ("df_regression", "ss_regression", "ms_regression", "f_statistic",
                "df_residual", "ss_residual", "ms_residual"):
        out.append(f"certified {key} {d['anova'][key]}")
    out.append("data")
    for row in d["rows"]:
        out.append(" ".join(row))
    return "\n".join(out) + "\n"


def main(argv):
    if len(argv) not in (2, 3):
        sys.stderr.write(__doc__)
        return 2
    src = argv[1]
    dst = argv[2] if len(argv) == 3 else os.path.dirname(os.path.abspath(__file__))
    try:
        for name in NAMES:
            d = parse_dat(os.path.join(src, name + ".dat"), name)
            path = os.path.join(dst, name + ".txt")
            with open(path, "w", encoding="ascii", newline="\n") as fh:
                fh.write(render(d))
            print(f"{name}: {d['kind']} {d['order']}, intercept {d['intercept']}, "
                  f"{d['observations']} observations -> {path}")
    except (ConvertError, OSError) as e:
        sys.stderr.write(f"convert.py: {e}\n")
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
