"""The one report schema of ``heatwalk evaluate`` (evaluation.json) and ``heatwalk demo`` (report.json).

:data:`REPORT_SCHEMA` is a JSON-Schema-style dict (the subset of JSON Schema used here: ``type``,
``properties``, ``required``, ``additionalProperties``, ``items``, ``enum``, ``const``,
``description``); :func:`validate_report` checks a report against it, and :func:`schema_rows`
lists every key with its type and meaning (the README's table is that list).

Conventions, stated once:

- units are in the key names: ``_nats`` (natural-log likelihoods), ``_seconds``, ``_rad``;
- ``likelihood.bound`` is true when the model's log-likelihood is a lower bound (an ELBO): then
  ``elbo_nats`` ≤ log p is reported, ``nll_bound_nats`` = −``elbo_nats`` is an upper bound on the
  negative log-likelihood, and ``mean_log_likelihood_nats`` is null; when false it is the other way
  round (``elbo_nats`` and ``nll_bound_nats`` null);
- sample metrics compare the model's samples with half A of the data, and report the same
  statistic for half B against half A (the noise floor: two samples of the data law).
"""

from __future__ import annotations

from heatwalk.errors import InputError

SCHEMA_ID = "heatwalk-report/1"

_NUMBER, _INT, _STR, _BOOL = {"type": "number"}, {"type": "integer"}, {"type": "string"}, {"type": "boolean"}


def _obj(properties: dict, required=None, description: str = "", nullable: bool = False) -> dict:
    """An object schema; every property is required unless ``required`` lists fewer."""
    out = {"type": ["object", "null"] if nullable else "object", "properties": properties,
           "required": list(properties) if required is None else list(required), "additionalProperties": False}
    if description:
        out["description"] = description
    return out


def _d(schema: dict, description: str, nullable: bool = False) -> dict:
    out = dict(schema, description=description)
    if nullable:
        out["type"] = [schema["type"], "null"]
    return out


def _pair(kind: dict, what: str) -> dict:
    """``samples_vs_half_a`` and ``noise_floor_half_b_vs_half_a`` of one statistic."""
    return {"samples_vs_half_a": _d(kind, f"{what}: the model's samples against half A of the data"),
            "noise_floor_half_b_vs_half_a": _d(kind, f"{what}: half B against half A (two samples of the data law)")}


_MMD = _obj({
    **_pair(_NUMBER, "unbiased MMD² (Gaussian kernel in the space's distance)"),
    "permutation_z": _d(_NUMBER, "MMD² / σ_perm on the permutation subsample: within a few units = within noise"),
    "permutation_sigma": _d(_NUMBER, "standard deviation of MMD² over random relabellings of samples and half A"),
    "permutation_p_value": _d(_NUMBER, "(1 + #{relabelled MMD² ≥ observed}) / (1 + n_permutations)"),
    "permutation_points": _d(_INT, "points of each set used for the permutation statistics"),
    "n_permutations": _d(_INT, "random relabellings"),
    "bandwidth": _d(_NUMBER, "kernel bandwidth h, in the space's distance (median distance within half A)"),
    "n": _d(_INT, "points of the samples and of half B used"),
    "n_half_a": _d(_INT, "points of half A used"),
    "kernel": _d(_STR, "the kernel, in words"),
}, description="squared maximum mean discrepancy, every space")

_METRICS_PROPERTIES = {
    "mmd_squared": _MMD,
    "wasserstein1_per_angle_rad": _obj({
        "samples_vs_half_a": {"type": "array", "items": _NUMBER,
                              "description": "circular W1 (radians) of each angle, samples against half A"},
        "noise_floor_half_b_vs_half_a": {"type": "array", "items": _NUMBER,
                                         "description": "circular W1 (radians) of each angle, half B against A"},
    }, description="spaces of angles"),
    "kmer_tv_distance": {"type": "object", "additionalProperties": _obj(_pair(_NUMBER, "total-variation distance")),
                         "description": "sequences: for k = 1, 2, 3 (keys \"1\", \"2\", \"3\"), the TV distance of "
                                        "k-mer spectra"},
    "length_distribution": _obj({
        **_pair(_NUMBER, "total-variation distance of the length distributions"),
        "mean_length_samples": _d(_NUMBER, "mean length of the samples"),
        "mean_length_half_a": _d(_NUMBER, "mean length in half A"),
        "mean_length_half_b": _d(_NUMBER, "mean length in half B"),
    }, description="variable-length sequences"),
}
_METRICS_REQUIRED = ["mmd_squared"]
_METRICS_PROPERTIES["per_factor"] = {
    "type": "object", "additionalProperties": _obj(dict(_METRICS_PROPERTIES), required=_METRICS_REQUIRED),
    "description": "products: the same metrics on each factor's marginal (keys \"0\", \"1\", …: the factor index)"}
#: keys whose value repeats the metrics' own schema (not listed again by :func:`schema_rows`)
_REPEATED = ("uniform_baseline", "per_factor")

REPORT_SCHEMA: dict = _obj({
    "schema": {"type": "string", "const": SCHEMA_ID, "description": "name and version of this schema"},
    "command": {"type": "string", "enum": ["evaluate", "demo"], "description": "the command that wrote it"},
    "space": _d(_STR, "the space, as its repr, e.g. Torus(n=2)"),
    "space_config": {"type": "object", "description": "the space's config (heatwalk.spaces.from_config rebuilds it)"},
    "seed": _d(_INT, "seed of the split and of the sampler"),
    "data": _obj({
        "file": _d(_STR, "the data file evaluated on (absolute path)", nullable=True),
        "n": _d(_INT, "points read"),
        "columns": {"type": ["array", "null"], "items": _STR, "description": "columns read, in order"},
        "n_half_a": _d(_INT, "points in half A (the reference of the sample metrics)"),
        "n_half_b": _d(_INT, "points in half B (the noise floor)"),
    }, description="the data the model is evaluated on"),
    "model": _obj({
        "folder": _d(_STR, "the model folder (absolute path)", nullable=True),
        "objective": _d(_STR, "training objective"),
        "sampler": _d(_STR, "sampler of the samples drawn for the metrics"),
        "reverse_steps": _d(_INT, "steps of the reverse-time sampler"),
        "n_samples": _d(_INT, "samples drawn (as many as half B)"),
    }, description="the model and how it was sampled"),
    "fit": _obj({
        "steps": _d(_INT, "training steps", nullable=True),
        "batch_size": _d(_INT, "training batch size", nullable=True),
        "n_train": _d(_INT, "training points", nullable=True),
        "final_loss": _d(_NUMBER, "mean training loss of the last 100 steps", nullable=True),
        "train_seconds": _d(_NUMBER, "training time", nullable=True),
    }, description="how the model was trained (null where the model folder does not say)"),
    "likelihood": _obj({
        "mean_log_likelihood_nats": _d(_NUMBER, "mean log p per point (bound false), else null", nullable=True),
        "elbo_nats": _d(_NUMBER, "mean ELBO per point, ≤ log p (bound true), else null", nullable=True),
        "nll_bound_nats": _d(_NUMBER, "−elbo_nats: an upper bound on the negative log-likelihood (bound true), "
                             "else null", nullable=True),
        "stderr_nats": _d(_NUMBER, "standard error of the mean reported"),
        "n": _d(_INT, "points whose likelihood was computed"),
        "bound": _d(_BOOL, "true when the likelihood is a lower bound (ELBO)"),
        "bits_per_token": _d(_NUMBER, "sequences: −elbo_nats / (L ln 2)"),
        "method": _d(_STR, "how log p was computed"),
        "reference_measure": _d(_STR, "the measure the densities are taken against"),
    }, required=["mean_log_likelihood_nats", "elbo_nats", "nll_bound_nats", "stderr_nats", "n", "bound", "method",
                 "reference_measure"], nullable=True,
        description="held-out log-likelihood (null with --likelihood-points 0)"),
    "sample_metrics": _obj({
        **_METRICS_PROPERTIES,
        "uniform_baseline": _obj(_METRICS_PROPERTIES, required=_METRICS_REQUIRED,
                                 description="demo: the same metrics for uniform samples (same bandwidth)"),
    }, required=_METRICS_REQUIRED, description="two-sample metrics, each where the space has what it needs"),
    "timings_seconds": _obj({
        "sampling_seconds": _d(_NUMBER, "drawing the samples"),
        "metrics_seconds": _d(_NUMBER, "the sample metrics"),
        "likelihood_seconds": _d(_NUMBER, "the log-likelihoods"),
    }, required=["sampling_seconds", "metrics_seconds"], description="wall-clock times"),
}, description="a heatwalk evaluation report")

_TYPES = {"object": dict, "array": list, "string": str, "boolean": bool, "null": type(None)}


def _type_ok(value, name: str) -> bool:
    if name == "number":
        return isinstance(value, (int, float)) and not isinstance(value, bool)
    if name == "integer":
        return isinstance(value, int) and not isinstance(value, bool)
    return isinstance(value, _TYPES[name])


def _problems(value, schema: dict, where: str):
    types = schema.get("type")
    if types is not None:
        names = [types] if isinstance(types, str) else list(types)
        if not any(_type_ok(value, t) for t in names):
            yield f"{where}: expected {' or '.join(names)}, got {value!r}"[:200]
            return
    if "const" in schema and value != schema["const"]:
        yield f"{where}: expected {schema['const']!r}, got {value!r}"
    if "enum" in schema and value not in schema["enum"]:
        yield f"{where}: expected one of {schema['enum']}, got {value!r}"
    if isinstance(value, dict):
        props = schema.get("properties", {})
        for key in schema.get("required", []):
            if key not in value:
                yield f"{where}.{key}: missing"
        extra = schema.get("additionalProperties", True)
        for key, v in value.items():
            if key in props:
                yield from _problems(v, props[key], f"{where}.{key}")
            elif extra is False:
                yield f"{where}.{key}: unknown key (known: {', '.join(props)})"
            elif isinstance(extra, dict):
                yield from _problems(v, extra, f"{where}.{key}")
    if isinstance(value, list) and "items" in schema:
        for i, v in enumerate(value):
            yield from _problems(v, schema["items"], f"{where}[{i}]")


def report_problems(report) -> list[str]:
    """Every way ``report`` departs from :data:`REPORT_SCHEMA` (empty when it validates)."""
    out = list(_problems(report, REPORT_SCHEMA, "report"))
    lik = report.get("likelihood") if isinstance(report, dict) else None
    if isinstance(lik, dict) and isinstance(lik.get("bound"), bool):
        exact, elbo, nll = lik.get("mean_log_likelihood_nats"), lik.get("elbo_nats"), lik.get("nll_bound_nats")
        if lik["bound"] and (exact is not None or elbo is None or nll is None):
            out.append("report.likelihood: bound is true, so elbo_nats and nll_bound_nats are given and "
                       "mean_log_likelihood_nats is null")
        if not lik["bound"] and (exact is None or elbo is not None or nll is not None):
            out.append("report.likelihood: bound is false, so mean_log_likelihood_nats is given and elbo_nats, "
                       "nll_bound_nats are null")
        if lik["bound"] and elbo is not None and nll is not None and abs(nll + elbo) > 1e-9 * max(1.0, abs(elbo)):
            out.append(f"report.likelihood: nll_bound_nats must be −elbo_nats, got {nll} and {elbo}")
    return out


def validate_report(report) -> dict:
    """``report`` itself if it follows :data:`REPORT_SCHEMA`; else InputError naming every key that does not."""
    problems = report_problems(report)
    if problems:
        shown = "; ".join(problems[:8]) + (f"; and {len(problems) - 8} more" if len(problems) > 8 else "")
        raise InputError(f"the report does not follow {SCHEMA_ID}: {shown}", field=problems[0].split(":")[0])
    return report


def schema_rows(schema: dict = REPORT_SCHEMA, prefix: str = "") -> list[tuple[str, str, str]]:
    """(key path, type, description) of every key, depth first (the README's table)."""
    rows = []
    for key, sub in schema.get("properties", {}).items():
        path = f"{prefix}{key}"
        kind = sub.get("type", "any")
        kind = " or ".join(kind) if isinstance(kind, list) else kind
        if kind.startswith("array") and "items" in sub:
            kind = kind.replace("array", f"array of {sub['items']['type']}", 1)
        optional = "" if key in schema.get("required", []) else " (optional)"
        rows.append((path, kind + optional, sub.get("description", "")))
        if key in _REPEATED:
            continue
        if "properties" in sub:
            rows.extend(schema_rows(sub, path + "."))
        elif isinstance(sub.get("additionalProperties"), dict):
            rows.extend(schema_rows(sub["additionalProperties"], path + ".K."))
    return rows
