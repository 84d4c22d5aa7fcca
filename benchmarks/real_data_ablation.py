"""Ablation table of the real-data benchmark: heatwalk variants (levers of heatwalk.fit) side by side.

    python benchmarks/real_data_ablation.py NAME=RESULT.json [NAME=RESULT.json ...] [--reference NAME]
        [--out benchmarks/results/real_data_ablation.json] [--markdown benchmarks/results/real_data_ablation.md]

Each RESULT.json is a file written by ``benchmarks/real_data.py`` (one variant, given by its
``--heatwalk-option`` settings, recorded in the file). Per data set and variant the table shows
heatwalk − mixture held-out NLL per point (nats; negative = heatwalk better) with its standard
error (over held-out frames for the trajectory data, else per point), and the paired change of
heatwalk's own NLL against the reference variant (default: the first), mean ± standard error of
the per-point differences, on the same held-out points. Files of different modes are not mixed:
every variant must come from the reference's mode.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from real_data import LABELS, ORDER, RESULTS, write_json  # noqa: E402


def _variant_rows(path: Path) -> tuple[dict, dict]:
    payload = json.loads(path.read_text())
    return payload, {r["data"]: r for r in payload["rows"]}


def _diff(row):
    p = row.get("paired_heatwalk_minus_mixture")
    if p is None:
        return None
    se = p["se_group"] if p.get("se_group") is not None else p["se_point"]
    return {"mean": p["mean"], "se": se}


def _change(row, ref_row):
    """Paired per-point change of heatwalk's NLL (variant − reference) on the same held-out points."""
    a, b = row["heatwalk"].get("logq"), ref_row["heatwalk"].get("logq")
    if a is None or b is None or len(a) != len(b):
        return None
    d = -(np.asarray(a) - np.asarray(b))
    return {"mean": float(d.mean()), "se": float(d.std(ddof=1) / math.sqrt(len(d)))}


def build(variants: list[tuple[str, Path]], reference: str) -> dict:
    loaded = {name: _variant_rows(path) for name, path in variants}
    ref_payload, ref_rows = loaded[reference]
    table = []
    for name, path in variants:
        payload, rows = loaded[name]
        if payload["mode"] != ref_payload["mode"]:
            raise SystemExit(f"{name}: mode {payload['mode']} differs from the reference's {ref_payload['mode']}")
        entry = {"variant": name, "file": str(path), "heatwalk_options": payload.get("heatwalk_options", {}),
                 "data": {}}
        for data in ORDER:
            row = rows.get(data)
            if row is None:
                continue
            hw = row["heatwalk"]
            entry["data"][data] = {
                "heatwalk_nll": hw.get("nll"), "mixture_nll": row["mixture"].get("nll"),
                "heatwalk_minus_mixture": _diff(row),
                "change_vs_reference": _change(row, ref_rows[data]) if data in ref_rows else None,
                "mmd_z": hw.get("mmd", {}).get("z"), "fit_seconds": hw.get("fit_seconds"),
                "steps": hw.get("steps"), "error": hw.get("error"),
            }
        table.append(entry)
    return {"mode": ref_payload["mode"], "reference": reference, "settings": ref_payload["settings"],
            "variants": table}


def _pm(x, digits=3):
    return "–" if x is None else f"{x['mean']:+.{digits}f} ± {x['se']:.{digits}f}"


def markdown(ablation: dict) -> str:
    datas = [d for d in ORDER if any(d in v["data"] for v in ablation["variants"])]
    head = "| variant | options | " + " | ".join(f"{LABELS[d]}: hw − mix (Δ vs {ablation['reference']})"
                                                for d in datas) + " |"
    lines = [f"Mode: {ablation['mode']}; settings {json.dumps(ablation['settings'])}.", "", head,
             "|" + "---|" * (2 + len(datas))]
    for v in ablation["variants"]:
        cells = []
        for d in datas:
            e = v["data"].get(d)
            if e is None:
                cells.append("–")
            elif e["error"]:
                cells.append("failed")
            else:
                change = "" if v["variant"] == ablation["reference"] else f" ({_pm(e['change_vs_reference'])})"
                cells.append(_pm(e["heatwalk_minus_mixture"]) + change)
        opts = ", ".join(f"{k}={json.dumps(val)}" for k, val in v["heatwalk_options"].items()) or "defaults"
        lines.append(f"| {v['variant']} | {opts} | " + " | ".join(cells) + " |")
    lines += ["", "hw − mix: heatwalk − mixture held-out NLL per point (nats; negative = heatwalk better) ± standard "
              "error (over held-out frames for the trajectory data). Δ: paired change of heatwalk's NLL against the "
              "reference variant on the same points (negative = the variant is better) ± per-point standard error."]
    return "\n".join(lines)


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("variants", nargs="+", metavar="NAME=RESULT.json")
    ap.add_argument("--reference", default=None, help="variant the changes are measured against (default: first)")
    ap.add_argument("--out", type=Path, default=RESULTS / "real_data_ablation.json")
    ap.add_argument("--markdown", type=Path, default=RESULTS / "real_data_ablation.md")
    args = ap.parse_args(argv)
    variants = []
    for item in args.variants:
        name, sep, path = item.partition("=")
        if not sep:
            raise SystemExit(f"{item!r}: expected NAME=RESULT.json")
        variants.append((name, Path(path)))
    reference = args.reference or variants[0][0]
    ablation = build(variants, reference)
    text = markdown(ablation)
    print(text)
    write_json(args.out, ablation)
    args.markdown.write_text(text + "\n")
    print(f"written {args.out} and {args.markdown}")


if __name__ == "__main__":
    main()
