"""The accuracy study of ``rtvoice fit`` summarised (:mod:`rtvoice.bench.fit_accuracy` runs and scores it):
as one JSON-ready object (:func:`summarise`) and as Markdown (:func:`render_text`): the table of errors
against the issue's targets, the counts the scoring rules promise, where the fit fails, every failure
and the worst cases with their truths."""

from __future__ import annotations

from collections.abc import Sequence

from rtvoice.bench.fit_accuracy import (
    ESTIMATES,
    F0_BEATING,
    F0_ONE,
    KINDS,
    PICKUP,
    PLUCK,
    TAKES_PER_GROUP,
    TARGETS,
    WORST_SHOWN,
    Case,
    StudyPlan,
    error_stats,
    errors_of,
    judged_kinds,
)
from rtvoice.bench.report import _table
from rtvoice.fit.synthetic import TakeTruth


def truth_text(t: TakeTruth) -> str:
    """A truth in one line: what :meth:`TakeTruth.summary` says, and the loss, coil and polarisations."""
    coil = f"resonance {t.resonance_hz:.0f} Hz Q {t.q:.2f}" if t.resonance_hz is not None and t.q else "no coil"
    beat = (f"beating {t.beating.offset_cents:+.2f} cent at {t.beating.level_db:.1f} dB" if t.beating
            else "one polarisation")
    return (f"{t.summary()}; L {t.speaking_length_mm:.1f} mm; T60 {t.t60_low_s:.2f} / {t.t60_high_s:.2f} s; "
            f"{coil}; {beat}")


def case_truth_text(truths: Sequence[TakeTruth]) -> str:
    """The truth of a case in one line (a group: its first take's, and every take's pluck)."""
    if not truths:
        return "not built"
    text = truth_text(truths[0])
    return text if len(truths) == 1 else text + "; the takes' plucks " + ", ".join(
        f"{t.pluck_mm:.1f}" for t in truths) + " mm"


def case_dict(case: Case) -> dict:
    """A case as JSON: its truths, the fit's estimates, its errors and what went wrong."""
    estimate = None if case.estimate is None else {
        k: case.estimate.get(k) for k in ("f0_hz", "inharmonicity", "t60_low_s", "t60_high_s", "pluck_mm",
                                          "pickup_mm", "aperture_mm", "resonance_hz", "q", "string", "fret",
                                          "assignment", "explained_energy")}
    return {"kind": case.kind, "index": case.index, "failure": case.failure, "stage": case.stage,
            "fit_s": round(case.fit_s, 3), "errors": {k: list(v) for k, v in case.errors.items()},
            "swapped": case.scores.swapped, "resonance": case.scores.resonance,
            "wrong_fret": case.scores.wrong_fret,
            "tags": list(case.tags), "warnings": list(case.warnings), "truth": case_truth_text(case.truths),
            "truths": [truth_text(t) for t in case.truths], "estimate": estimate}


def summarise(cases: Sequence[Case], plan: StudyPlan) -> dict:
    """The study's figures: per kind and estimate, the error statistics and the target's verdict;
    the counts the scoring rules promise; every failure; the worst cases."""
    stats = {kind: {key: error_stats(errors_of(cases, kind, key)) for key, _, _ in ESTIMATES} for kind in KINDS}
    targets = []
    for key, label, unit in ESTIMATES:
        if key not in TARGETS:
            continue
        for kind in judged_kinds(key):
            mean = stats[kind][key]["mean"]
            targets.append({"estimate": key, "label": label, "unit": unit, "kind": kind, "goal": TARGETS[key],
                            "mean": mean, "met": None if mean is None else bool(mean <= TARGETS[key])})
    fitted = [c for c in cases if c.failure is None]
    places = [(x.pluck_mm, x.speaking_length_mm) for c in cases for x in c.truths]
    places += [(p, c.truths[0].speaking_length_mm) for c in cases if c.truths for p in c.truths[0].pickup_mm]
    counts = {
        "cases": {kind: plan.count(kind) for kind in KINDS},
        "takes": sum(plan.count(k) for k in ("single", "pair")) + TAKES_PER_GROUP * plan.groups,
        "failures": {kind: sum(c.failure is not None for c in cases if c.kind == kind) for kind in KINDS},
        "true_places": len(places), "true_places_past_middle": sum(p > length / 2 for p, length in places),
        "swapped": {kind: sum(c.scores.swapped for c in fitted if c.kind == kind) for kind in ("single", "pair")},
        "resonance_qualified": {kind: sum(c.scores.resonance != "not scored" for c in fitted if c.kind == kind)
                                for kind in KINDS},
        "resonance_missed": {kind: sum(c.scores.resonance == "missed" for c in fitted if c.kind == kind)
                             for kind in KINDS},
        "wrong_fret": {kind: sum(c.scores.wrong_fret for c in fitted if c.kind == kind) for kind in KINDS},
        "beating": {kind: sum(1 for c in fitted if c.kind == kind and F0_BEATING in c.errors) for kind in KINDS},
    }
    worst = []
    for key, label, unit in ESTIMATES:
        if key not in TARGETS:
            continue
        ranked = sorted(((max(c.errors[key]), c) for c in fitted if c.kind in judged_kinds(key) and key in c.errors),
                        key=lambda pair: -pair[0])
        worst += [{"estimate": key, "label": label, "unit": unit, "error": e, **case_dict(c)}
                  for e, c in ranked[:WORST_SHOWN]]
    by_tag = tag_means(fitted)
    return {"plan": {"singles": plan.singles, "pairs": plan.pairs, "groups": plan.groups, "seed": plan.seed,
                     "seconds": plan.seconds, "takes_per_group": TAKES_PER_GROUP},
            "stats": stats, "targets": targets, "counts": counts, "by_tag": by_tag,
            "failures": [case_dict(c) for c in cases if c.failure is not None], "worst": worst,
            "warned": [{"kind": c.kind, "index": c.index, "warnings": list(c.warnings)} for c in cases if c.warnings],
            "fit_s": error_stats([c.fit_s for c in fitted]), "cases": [case_dict(c) for c in cases]}


def tag_means(fitted: Sequence[Case]) -> list[dict]:
    """Single takes' mean pickup and pluck errors with and without each tag: where the fit fails."""
    singles = [c for c in fitted if c.kind == "single"]
    tags = sorted({t for c in singles for t in c.tags})
    rows = []
    for tag in tags:
        row: dict[str, object] = {"tag": tag}
        for side, chosen in (("with", [c for c in singles if tag in c.tags]),
                             ("without", [c for c in singles if tag not in c.tags])):
            row[side] = {"count": len(chosen), PICKUP: error_stats([c.errors[PICKUP][0] for c in chosen])["mean"],
                         PLUCK: error_stats([c.errors[PLUCK][0] for c in chosen])["mean"]}
        rows.append(row)
    return rows


# -- as text ---------------------------------------------------------------------------------------------

TABLE_KINDS = ("single", "group", "pair")  # the judged kinds first
DECIMALS = {"cent": 3, "%": 2, "mm": 2}


def _figure(value: float | None, unit: str) -> str:
    return "-" if value is None else f"{value:.{DECIMALS[unit]}f}"


def errors_table(result: dict) -> str:
    """Estimate by kind: count, mean, median, 95th percentile and largest absolute error, the goal
    and whether the mean meets it."""
    rows = []
    for key, label, unit in ESTIMATES:
        for kind in TABLE_KINDS:
            s = result["stats"][kind][key]
            if key in TARGETS and kind in judged_kinds(key):
                goal, met = f"<= {TARGETS[key]:g} {unit}", "-" if s["mean"] is None else (
                    "yes" if s["mean"] <= TARGETS[key] else "NO")
            elif key in TARGETS:
                goal, met = "two pickups: not modelled", "-"
            else:
                goal, met = "", ""
            if s["count"] == 0 and key in (F0_ONE, F0_BEATING):
                continue  # no take of this kind without (or with) a second polarisation
            rows.append([f"{label} ({unit})", kind, str(s["count"]), *(_figure(s[x], unit)
                                                                      for x in ("mean", "median", "p95", "max")),
                         goal, met])
    return _table(["estimate", "kind", "n", "mean", "median", "p95", "max", "goal (mean)", "met"], rows)


def _per_kind(counts: dict, kinds: tuple[str, ...] = KINDS) -> str:
    return ", ".join(f"{kind} {counts[kind]}" for kind in kinds)


def counts_lines(result: dict) -> list[str]:
    c, plan = result["counts"], result["plan"]
    fitted = {kind: plan[{"single": "singles", "pair": "pairs", "group": "groups"}[kind]] - c["failures"][kind]
              for kind in KINDS}
    return [
        f"- Failures (fits that raised, or takes that could not be built): {_per_kind(c['failures'])} "
        f"(listed below).",
        f"- Places: {c['true_places_past_middle']} of {c['true_places']} true distances lay past the middle of "
        f"the stopped string (scored against their mirror image L - x). Scored with the fit's pickup as the "
        f"pluck (the unordered pair): {c['swapped']['single']} of {fitted['single']} single takes, "
        f"{c['swapped']['pair']} of {fitted['pair']} pairs.",
        f"- Resonance scored where the truth's Q >= 1.5 and the resonance lies below the highest usable "
        f"partial: {_per_kind(c['resonance_qualified'])} fits qualified; of those, no resonance fitted: "
        f"{_per_kind(c['resonance_missed'])}.",
        f"- Takes with a beating second polarisation: {_per_kind(c['beating'])} fits. The fit chose another "
        f"fret than the truth's: {_per_kind(c['wrong_fret'])}.",
    ]


def tags_table(result: dict) -> str:
    rows = []
    for row in result["by_tag"]:
        w, wo = row["with"], row["without"]
        rows.append([row["tag"], str(w["count"]), _figure(w[PICKUP], "mm"), _figure(w[PLUCK], "mm"),
                     str(wo["count"]), _figure(wo[PICKUP], "mm"), _figure(wo[PLUCK], "mm")])
    return _table(["single takes", "n with", "pickup mm", "pluck mm", "n without", "pickup mm", "pluck mm"], rows)


def _estimate_text(e: dict | None) -> str:
    if e is None:
        return "no fit"
    plucks = e["pluck_mm"] if isinstance(e["pluck_mm"], list) else [e["pluck_mm"]]
    coil = "no resonance" if e["resonance_hz"] is None else f"resonance {e['resonance_hz']:.0f} Hz Q {e['q']:.2f}"
    return (f"fit: fret {e['fret']}, f0 {e['f0_hz']:.3f} Hz, B {e['inharmonicity']:.3g}, T60 {e['t60_low_s']:.2f} / "
            f"{e['t60_high_s']:.2f} s, pluck {', '.join(f'{p:.1f}' for p in plucks)} mm, pickup "
            f"{e['pickup_mm']:.1f} mm, {coil}")


def case_lines(case: dict, head: str, seen: set[tuple[str, int]] | None = None) -> list[str]:
    """A case: its head line and tags, then its truth and the fit (once: a case already in ``seen``
    gets its head line only)."""
    lines = [f"- {head}" + (f" [{', '.join(case['tags'])}]" if case["tags"] else "")]
    name = (case["kind"], case["index"])
    if seen is not None and name in seen:
        return [lines[0] + " (above)"]
    if seen is not None:
        seen.add(name)
    lines.append(f"  - truth: {case['truth']}")
    if case["estimate"] is not None:
        lines.append(f"  - {_estimate_text(case['estimate'])}")
    return lines


def machine_lines(m: dict) -> list[str]:
    """The machine the study ran on (it is not a timing: nothing is pinned)."""
    blas = m.get("blas_build", {})
    return [f"- CPU: {m['cpu_model']} ({m['cpus']} CPUs, {m.get('cpu_mhz')} MHz); memory {m.get('memory_gib')} GiB; "
            f"{m['os']}; load average (1, 5, 15 min) at start {m.get('load_average_at_start')}, at end "
            f"{m.get('load_average_at_end')}",
            f"- Python {m['python']}, numpy {m['numpy']}, scipy {m['scipy']}; BLAS {blas.get('name')} "
            f"{blas.get('version')}, OPENBLAS_NUM_THREADS={m.get('OPENBLAS_NUM_THREADS')}"]


def render_text(result: dict) -> str:
    """The study as Markdown: the table, the counts, where it fails, the failures and the worst cases."""
    plan = result["plan"]
    lines = [
        "## Fitting a recorded note: accuracy", "",
        f"Produced by `{result['command']}` in {result['wall_s']:.0f} s (building the takes and fitting them; "
        f"a fit alone: median {_figure(result['fit_s']['median'], '%')} s, largest "
        f"{_figure(result['fit_s']['max'], '%')} s).",
        f"Cases: {plan['singles']} single takes, {plan['pairs']} pairs (two pickups mixed at equal level), "
        f"{plan['groups']} groups of {plan['takes_per_group']} takes of one string plucked at different spots "
        f"({result['counts']['takes']} takes of {plan['seconds']:g} s); seed {plan['seed']}.", "",
        *machine_lines(result["machine"]), "",
        errors_table(result), "", *counts_lines(result), "",
        "Where it fails: single takes' mean pickup and pluck errors with and without each condition of the truth",
        "(pluck near pickup: within 10 mm; null: a place within 2 % of L of L/2, L/3 or 2L/3; short decay: T60 at",
        "2 kHz under 0.5 s):", "", tags_table(result), "",
    ]
    failures = result["failures"]
    lines.append(f"Failures ({len(failures)}):" if failures else "Failures: none.")
    for f in failures:
        lines += case_lines(f, f"{f['kind']} {f['index']} ({f['stage']}): {f['failure']}")
    warned = result["warned"]
    lines += ["", f"Fits that gave warnings ({len(warned)}; each warning once per fit):" if warned
              else "Fits that gave warnings: none."]
    lines += [f"- {w['kind']} {w['index']}: {'; '.join(w['warnings'])}" for w in warned]
    lines += ["", f"Worst cases of each estimate with a goal (`rtvoice.bench.fit_accuracy.run_case({plan['seed']}, "
              "kind, index)` runs one again):"]
    seen: set[tuple[str, int]] = set()
    for w in result["worst"]:
        lines += case_lines(w, f"{w['label']}: {_figure(w['error'], w['unit'])} {w['unit']} - {w['kind']} "
                                f"{w['index']}", seen)
    return "\n".join(lines) + "\n"


__all__ = ["case_dict", "errors_table", "render_text", "summarise", "truth_text"]
