"""The probe, sweep and rules check commands."""

from __future__ import annotations

from pitchguard.cli.console import NullContext, make_console, number_text, say
from pitchguard.errors import (
    EXIT_OK,
    PitchguardError,
)
from pitchguard.outputs.user_text import markup_safe, markup_safe_path, shown


def _dof_text(*a, **k) -> str:
    from pitchguard.outputs.texts import dof_text  # here: the command line imports no numpy

    return dof_text(*a, **k)


def _as_drawn(rule):
    from pitchguard.api.probing import as_drawn

    return as_drawn(rule)


def _sized_text(m) -> str:
    from pitchguard.optics.resist import UNSIZED

    if m is None or m.sizing == 0:
        return ""
    reach = " (no bias reaches size)" if m.sizing == UNSIZED else ""
    return f"{m.bias_nm:+.1f} nm per edge{reach}"


def _light(exposure) -> str:
    from pitchguard.outputs.texts import light_text, medium_text

    return f"{light_text(exposure.polarization)} light {medium_text(exposure)}"


def _dof_limited(*a) -> bool:
    from pitchguard.outputs.texts import dof_limited

    return dof_limited(*a)


def cmd_rules_check(args) -> int:
    from rich.table import Table

    from pitchguard.deck import load_deck
    from pitchguard.judge.gratings import square_array_cutoff
    from pitchguard.optics.orders import cutoff_pitch

    deck = load_deck(args.deck)
    console = make_console()
    scale = (
        f"drawn at mask scale, reduction {deck.reduction:g}"
        if deck.drawn_scale == "mask"
        else "drawn at wafer scale"
    )
    console.print(
        f"{markup_safe_path(args.deck)}: valid deck '{markup_safe(deck.name)}', "
        f"{len(deck.layers)} layers, {scale}"
    )
    t = Table(show_edge=False)
    for col in (
        "layer",
        "source",
        "field",
        "exposure",
        "λ nm",
        "NA",
        "σ max",
        "cutoff x / y nm",
        "square array cutoff nm",
        "k1 risk / marginal pitch nm",
    ):
        t.add_column(col)
    for r in deck.layers:
        e = r.exposure
        cx, cy = cutoff_pitch(e, 90.0), cutoff_pitch(e, 0.0)
        pr = 2 * r.k1_risk_below * e.wavelength_nm / e.na
        pm = 2 * r.k1_marginal_below * e.wavelength_nm / e.na
        t.add_row(
            markup_safe(r.name),
            markup_safe(r.source),
            markup_safe(r.field),
            markup_safe(r.exposure_name),
            f"{e.wavelength_nm:g}",
            f"{e.na:g}",
            f"{e.sigma_max:g}",
            f"{cx:.1f} / {cy:.1f}",
            number_text(square_array_cutoff(e), "", 1),
            f"{pr:.1f} / {pm:.1f}",
        )
    console.print(t)
    console.print("[dim]pitches at wafer scale; cutoff x is for lines along y (pitch along x)[/]")
    for r in deck.layers:
        e = r.exposure
        console.print(f"{markup_safe(r.name)}: {markup_safe(_light(e), None)}")
    return EXIT_OK


def _grating_json(r, rule) -> dict:
    from pitchguard.api.probing import grating_dict

    return grating_dict(r, rule)


def cmd_probe(args) -> int:
    import json

    from pitchguard.api.probing import probe
    from pitchguard.judge.gratings import pupil_picture

    p = probe(
        args.rules,
        args.layer,
        args.pitch,
        args.cd,
        orientation_deg=args.orientation,
        focus_nm=args.focus,
        pitch_y_nm=args.pitch_y,
        cd_y_nm=args.cd_y,
    )
    if p.kind == "array":
        return _probe_array(args, p)
    rule, r = p.rule, p.raw
    drawn = p.as_drawn.raw if p.as_drawn is not None else None
    if args.plot is not None:
        from pitchguard.outputs.plots import plot_image

        plot_image(rule, r, args.plot, [args.rules])
    if args.json:
        say(json.dumps(p.to_dict()))
        return EXIT_OK
    console = make_console()
    e = rule.exposure
    ill = e.illumination
    console.print(
        f"[bold]{markup_safe(rule.name)}[/] ({markup_safe(rule.field)} field) on "
        f"{markup_safe(rule.exposure_name)}: "
        f"λ {e.wavelength_nm:g} nm, NA {e.na:g}, {markup_safe(ill.shape)} σmax {e.sigma_max:g}, "
        f"{markup_safe(e.mask.kind)} mask, {markup_safe(_light(e), None)}"
    )
    feature = "line" if rule.field == "clear" else "opening"
    console.print(
        f"grating: pitch {r.pitch_nm:g} nm, {feature} {r.cd_nm:g} nm, "
        f"lines along {r.orientation_deg:g}°"
    )
    o = r.orders
    console.print(
        f"k1 {o.k1:.3f}; orders on axis {list(o.orders_on_axis)}; through the source "
        f"{list(o.orders)}; source sending 0th + a 1st order: {100 * o.two_beam_fraction:.1f} %; "
        f"cutoff pitch {o.cutoff_pitch_nm:.1f} nm"
    )
    console.print()
    for line in pupil_picture(rule, r):
        console.print("   " + line, highlight=False, markup=False)
    console.print(
        "   [dim]* pupil edge, 0 source (0th order), + / - source shifted by the "
        "+1st / -1st order inside the pupil, 2 higher orders[/]"
    )
    console.print()
    m = r.metrics
    if m is not None:
        at = f" (focus {r.focus_nm:g} nm)" if r.focus_nm else ""
        rows = [
            (f"image contrast{at}", number_text(r.shown.contrast, "", 3)),
            (f"NILS at the printed edges{at}", number_text(r.shown.nils, "", 2)),
            (
                "printed CD at nominal dose",
                "lost" if m.lost else "bridged" if m.bridged else number_text(m.cd_nm, " nm", 1),
            ),
            (
                "CD error",
                number_text(m.cd_error_pct, " %", 1) if rule.anchor else "not judged (no anchor)",
            ),
            ("exposure latitude", number_text(m.el_pct, " %", 1)),
            ("depth of focus", _dof_text(m.dof_nm, rule.focus_span_nm)),
            (
                "threshold / dose-to-size",
                f"{m.threshold:.3f} / {number_text(m.dose_to_size, '', 3)}",
            ),
        ]
        if m.sizing:
            rows.insert(0, ("mask bias (sized)", _sized_text(m)))
        for k, v in rows:
            console.print(f"  {k:<28} {v}")
    console.print()
    if drawn is not None:
        dm = drawn.metrics
        top = drawn.violations[0].check if drawn.violations else ""
        console.print(
            f"  as drawn (no bias): {drawn.severity}{f' ({top})' if top else ''}; printed CD "
            f"{'lost' if dm.lost else 'bridged' if dm.bridged else number_text(dm.cd_nm, ' nm', 1)}"
            f", NILS {number_text(dm.nils, '', 2)}, EL {number_text(dm.el_pct, ' %', 1)}"
        )
        console.print('  judged as sized (sizing = "retarget"):')
    return _print_verdict(console, r.violations)


def cmd_sweep(args) -> int:
    import numpy as np
    from rich.table import Table

    from pitchguard.deck import load_deck
    from pitchguard.judge.gratings import bands, default_pitches, through_pitch
    from pitchguard.outputs.json_report import write_json
    from pitchguard.outputs.verdict import CAUTION

    deck = load_deck(args.rules)
    rule = deck.layer(args.layer)
    cd = args.cd
    if cd is None:
        if rule.anchor is None:
            raise PitchguardError(
                f"layer '{shown(rule.name)}' has no anchor in the deck: give --cd NM"
            )
        cd = rule.anchor.cd_nm
    if args.pitches:
        lo, hi, step = args.pitches
        pitches = np.arange(lo, hi + step / 2, step)
    else:
        pitches = default_pitches(rule, cd)
    console = make_console()
    err = make_console(stderr=True)
    with err.status(f"imaging {len(pitches)} pitches ...") if err.is_terminal else NullContext():
        results = through_pitch(rule, cd, pitches, args.orientation)
    if not results:
        raise PitchguardError(f"no pitch in the range is larger than the CD ({cd:g} nm)")
    t = Table(
        title=f"{markup_safe(rule.name)}: CD {cd:g} nm through pitch",
        title_justify="left",
        show_edge=False,
    )
    drawn_rule = _as_drawn(rule)
    drawn = None if drawn_rule is None else through_pitch(drawn_rule, cd, pitches, args.orientation)
    cols = ["pitch nm", "k1", "contrast", "NILS", "CD err %", "EL %", "DOF nm", "verdict"]
    if drawn is not None:
        cols[4:5] = ["bias nm"]
        cols += ["as drawn"]
    for col in cols:
        t.add_column(col, justify="left" if col in ("verdict", "as drawn") else "right")

    def verdict(r) -> str:
        return r.severity if r.severity == "ok" else f"{r.severity} ({r.violations[0].check})"

    for k, r in enumerate(results):
        m = r.metrics
        row = [
            f"{r.pitch_nm:.1f}",
            f"{r.orders.k1:.3f}",
            number_text(m.contrast if m else None, "", 3),
            number_text(m.nils if m else None),
            number_text(m.cd_error_pct if m else None, "", 1),
            number_text(m.el_pct if m else None, "", 1),
            _dof_text(m.dof_nm if m else None, rule.focus_span_nm, ""),
            verdict(r),
        ]
        if drawn is not None:
            row[4] = number_text(m.bias_nm if m and m.sizing else None, "", 1)
            row.append(verdict(drawn[k]))
        t.add_row(*row)
    console.print(t)
    for a, b, sev in bands(results):
        console.print(f"  {sev:<8} pitch {a:.1f} - {b:.1f} nm")
    console.print(f"[dim]{CAUTION}[/]")
    inputs = [args.rules]
    if args.plot is not None:
        from pitchguard.outputs.plots import plot_sweep

        plot_sweep(rule, results, args.plot, inputs)
    if args.json is not None:
        write_json(
            args.json,
            {
                "layer": rule.name,
                "cd_nm": cd,
                "caution": CAUTION,
                "bands": [{"from_nm": a, "to_nm": b, "severity": s} for a, b, s in bands(results)],
                "pitches": [_grating_json(r, rule) for r in results],
                "as_drawn": None
                if drawn is None
                else {
                    "bands": [
                        {"from_nm": a, "to_nm": b, "severity": s} for a, b, s in bands(drawn)
                    ],
                    "pitches": [_grating_json(r, drawn_rule) for r in drawn],
                },
            },
            inputs,
        )
    return EXIT_OK


def _probe_array(args, p) -> int:
    """``probe`` of a rectangular array of compact features."""
    import json

    rule, r = p.rule, p.raw
    if args.plot is not None:
        from pitchguard.outputs.plots import plot_array

        plot_array(rule, r, args.plot, [args.rules])
    if args.json:
        say(json.dumps(p.to_dict()))
        return EXIT_OK
    console = make_console()
    e = rule.exposure
    feature = "posts" if rule.field == "clear" else "holes"
    console.print(
        f"[bold]{markup_safe(rule.name)}[/] ({markup_safe(rule.field)} field) on "
        f"{markup_safe(rule.exposure_name)}: λ {e.wavelength_nm:g} nm, NA {e.na:g}, "
        f"{markup_safe(e.illumination.shape)}, {markup_safe(e.mask.kind)} mask, "
        f"{markup_safe(_light(e), None)}"
    )
    console.print(
        f"array: {r.cd_nm[0]:g} x {r.cd_nm[1]:g} nm {feature} at pitch "
        f"{r.pitch_nm[0]:g} x {r.pitch_nm[1]:g} nm"
    )
    lo = r.orders
    console.print(f"k1 {lo.k1:.3f} (finest lattice spacing {lo.pitch_min_nm:.1f} nm)")
    for d in lo.first:
        state = "imaged" if d.resolved else "[bold red]not imaged[/]"
        console.print(
            f"  orders {list(d.order)} at {d.angle_deg:5.1f}°: spacing {d.pitch_nm:.1f} nm, "
            f"cutoff {d.cutoff_pitch_nm:.1f} nm, {state}"
        )
    m, shown = r.metrics, r.shown
    at = f" (focus {r.focus_nm:g} nm)" if r.focus_nm else ""
    printed = (
        "missing"
        if m.missing
        else "merged with its neighbours"
        if m.merged
        else f"{number_text(m.size_x_nm, '', 1)} x {number_text(m.size_y_nm, ' nm', 1)}"
    )
    for k, v in (
        (f"image contrast{at}", number_text(shown.contrast, "", 3)),
        (
            f"NILS x / y{at}",
            f"{number_text(shown.nils_x, '', 2)} / {number_text(shown.nils_y, '', 2)}",
        ),
        ("printed at nominal dose", printed),
        ("exposure latitude", number_text(m.el_pct, " %", 1)),
        ("depth of focus", _dof_text(m.dof_nm, rule.focus_span_nm)),
    ):
        console.print(f"  {k:<28} {v}")
    console.print()
    return _print_verdict(console, r.violations)


def _print_verdict(console, violations) -> int:
    """Each broken limit (or "ok") and the screening caution; the exit code."""
    from pitchguard.outputs.verdict import CAUTION

    if violations:
        for v in violations:
            console.print(f"  [bold]{v.severity}[/] {v.check}: {markup_safe(v.message, None)}")
    else:
        console.print("  ok: no limit of this layer is broken")
    console.print(f"[dim]{CAUTION}[/]")
    return EXIT_OK
