"""Rows and sentences of the run's modal model: sweep-free readings beside the apparent
ones (which governs marked), per-bearing criticals and splits, the shared model, and the
fitted curves the Bode and polar plots draw. Pure: findings JSON in, text out."""

from __future__ import annotations

from typing import Any, Mapping

from rundash.presentation import MISSING, number, plus_minus

__all__ = ["GOVERNS_MARK", "reading_cells", "bearing_mode_lines", "model_curves",
           "modal_model_lines"]


GOVERNS_MARK = " (governs)"


def reading_cells(c: Mapping[str, Any]) -> dict[str, str]:
    """The apparent (sweep) and the sweep-free reading of a critical side by side
    ('speed rpm, AF'), the one the margin check used marked with :data:`GOVERNS_MARK`; ``governs`` and
    ``governing_reason`` say which and why."""
    ap = c.get("apparent") or {"speed_rpm": c.get("speed_rpm"), "af": c.get("af_governing")}
    sf = c.get("sweep_free")
    gov = c.get("governing") or "apparent"
    app = f"{number(ap.get('speed_rpm'))}, AF {number(ap.get('af'), 2)}"
    if sf and sf.get("uncertainty_note"):
        # the bootstrap's +/- would understate a systematic misfit: no +/- is shown
        free = f"{number(sf.get('speed_rpm'))}, AF {number(sf.get('af'), 2)}; fit poor"
    elif sf:
        free = (f"{plus_minus(sf.get('speed_rpm'), sf.get('speed_std_rpm'), 0)}, AF "
                f"{plus_minus(sf.get('af'), sf.get('af_std'), 2)}")
    else:
        free = MISSING
    if gov == "sweep-free":
        free += GOVERNS_MARK
    elif gov == "apparent":
        app += GOVERNS_MARK
    words = {"sweep-free": "sweep-free", "apparent": "apparent (sweep)",
             "conservative": "conservative of both (unresolved split)"}
    word = words.get(gov, str(gov))
    if gov == "apparent" and sf and not sf.get("fit_good"):
        word += ": fit not good"
    return {"apparent": app, "sweep_free": free, "governs": word,
            "governing_reason": c.get("governing_reason") or ""}


def bearing_mode_lines(findings) -> list[str]:
    """Per bearing with an X/Y pair: the criticals of the modal model's major-axis
    response and its modes' directions, a split critical said as such; one sentence each."""
    out = []
    for b in (findings or {}).get("bearing_modes") or []:
        crit = ", ".join(f"{plus_minus(x.get('speed_rpm'), x.get('speed_std_rpm'), 0)} rpm "
                         f"(AF {number(x.get('af'), 2)})" for x in b.get("criticals") or [])
        modes = "; ".join(f"mode {number(m.get('natural_frequency_rpm'))} rpm along "
                          f"{number(m.get('direction_deg'), 0, '°')}, {m.get('whirl', '?')}"
                          for m in b.get("modes") or [])
        band = b.get("band_rpm") or [None, None]
        text = (f"bearing {b.get('bearing', '?')}, {number(band[0])}-{number(band[1])} rpm: "
                f"major-axis criticals {crit or 'none'}; {modes or 'no mode'}")
        if b.get("note"):
            text += f". {b['note']}"
        if not b.get("fit_good", True):
            text += " (the fit of this band is not good enough to govern)"
        out.append(text)
    return out


def model_curves(findings, probe: str, *, kind: str, compensated: bool) -> list[dict[str, Any]]:
    """The run's fitted model as steady 1X curves of one probe, for the Bode and polar
    plots; none when the data drawn are not what the model was fitted to (proximity
    probes: slow-roll compensated; seismic probes: as measured).

    >>> f = {"modal_model": {"status": "fitted", "curves": [{"probe": "A", "speed_rpm": [1]}]}}
    >>> [len(model_curves(f, "A", kind="proximity", compensated=c)) for c in (True, False)]
    [1, 0]
    """
    mm = (findings or {}).get("modal_model") or {}
    if mm.get("status") != "fitted" or compensated != (kind == "proximity"):
        return []
    return [c for c in mm.get("curves") or [] if c.get("probe") == probe]


def modal_model_lines(findings) -> list[str]:
    """The run's shared modal model in a few sentences (modes with uncertainties and the
    shape hint, or why there is none)."""
    mm = (findings or {}).get("modal_model")
    if not mm:
        return []
    if mm.get("status") != "fitted":
        return [f"no modal model: {mm.get('note') or 'not fitted'}"]
    out = [f"one model for {', '.join(mm.get('fitted_probes') or [])} ({mm.get('basis', '')}); "
           f"misfit {number(mm.get('misfit_ratio'), 2)} × the noise"
           + ("; the ± below are statistical only: with a systematic misfit this large the "
              "real errors are larger" if (mm.get("misfit_ratio") or 0) > 2 else "")]
    for m in mm.get("modes") or []:
        h = m.get("shape_hint") or {}
        out.append(
            f"mode {m.get('index', 0) + 1}: fn {plus_minus(m.get('natural_frequency_rpm'), m.get('natural_frequency_std_rpm'), 0)}"
            f" rpm, ζ {plus_minus(m.get('damping_ratio'), m.get('damping_ratio_std'), 3)}, steady "
            f"peak {plus_minus(m.get('peak_speed_rpm'), m.get('peak_speed_std_rpm'), 0)} rpm, AF "
            + (f"{plus_minus(m.get('af'), m.get('af_std'), 2)}" if m.get("af") is not None
               else "none (critically damped)")
            + (f"; shape: {h['shape']} ({h.get('between', '')}, a hint)" if h.get("shape") else ""))
    for cl in mm.get("clusters") or []:
        band = cl.get("band_rpm") or [None, None]
        if cl.get("notes"):
            out.append(f"{number(band[0])}-{number(band[1])} rpm: " + "; ".join(cl["notes"]))
    return out
