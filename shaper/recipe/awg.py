"""The ``[awg]`` section: what the instrument plays between its samples (README, "The AWG's
analog output"); its stages are line stages (:mod:`shaper.recipe.lines`) that every
channel passes before its own line."""

from __future__ import annotations

from shaper.recipe.lines import (
    AWG_DEFAULT_FRACTION,
    AWG_DEFAULT_KIND,
    AWG_DEFAULT_ORDER,
    AWG_FILTERS,
    AWG_KEYS,
    AwgOutput,
    LowPass,
    Stage,
    _stage,
)


def read_awg(r, t: dict, sample_rate_hz: float, oversample: int) -> AwgOutput:
    """Read ``[awg]``: the instrument's output filter (default: :data:`AWG_DEFAULT_KIND` of
    order 4 at 0.4 of the sample rate, marked as assumed)."""
    for key in t:
        if key not in AWG_KEYS:
            r.fail(f"awg.{key}", f"unknown key; valid keys here: {', '.join(AWG_KEYS)}")
    if not t:
        return AwgOutput((Stage(AWG_DEFAULT_KIND, LowPass(
            order=AWG_DEFAULT_ORDER, cutoff_hz=AWG_DEFAULT_FRACTION * sample_rate_hz)),),
                         assumed=True)
    kind = r.choice(t, "filter", "awg.filter", AWG_FILTERS, AWG_DEFAULT_KIND)
    if kind == "none":
        extra = [k for k in t if k != "filter"]
        if extra:
            r.fail(f"awg.{extra[0]}", "an ideal staircase (filter = \"none\") takes no other "
                                      "key")
        return AwgOutput(())
    table = {"kind": kind, **{k: v for k, v in t.items() if k != "filter"}}
    if kind in ("bessel", "butterworth"):
        table.setdefault("order", AWG_DEFAULT_ORDER)
    if kind != "measured":
        table.setdefault("cutoff", AWG_DEFAULT_FRACTION * sample_rate_hz)
    # the instrument's filter may pass beyond the samples' Nyquist frequency (images of
    # the staircase then reach the chip): the fine grid of oversample slices resolves it
    stage = _stage(r, table, "awg", sample_rate_hz * oversample, names={"kind": "filter"})
    return AwgOutput((stage,))
