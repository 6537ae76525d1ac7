"""The ``[export]`` section: the instrument a waveform is written for (full scale, DAC
bits, granularity and padding, IF and sideband, pre-distortion, the I/Q mixer's
imperfections to correct; README, "Recipe reference")."""

from __future__ import annotations

from shaper.physics.systems import System
from shaper.recipe.schema import KEYS, PADDING, ExportSettings, MixerSettings, _Reader
from shaper.recipe.units import format_quantity

PADDINGS = PADDING  # where the zeros of the granularity go; ours is spelled "centre"
SPELLINGS = {"center": "centre"}  # the other spelling, taken as ours


def padding_word(value):
    """``export.padding`` or ``--padding`` as we spell it ("center" is "centre"); any
    other value is returned as it came, for the reader to refuse."""
    return SPELLINGS.get(value, value) if isinstance(value, str) else value


def read_export(r: _Reader, t: dict, system: System, limits: dict[str, float],
            rate: float) -> ExportSettings:
    r.check_keys(t, "export")
    channels = [c.name for c in system.channels]
    # a channel that is not driven still has a column: give it any positive full scale
    fallback = max(limits.values())
    full = r.per_channel(t["full_scale"], "export.full_scale", channels) \
        if "full_scale" in t else {c: limits[c] or fallback for c in channels}
    for c in channels:
        if limits[c] > full[c] * (1 + 1e-12):
            key = "pulse.max_flux" if c.endswith("_flux") else "pulse.max_rabi"
            r.fail(key, f"the limit {format_quantity(limits[c], 'Hz')} of channel {c} is above "
                        f"its full scale {format_quantity(full[c], 'Hz')} (export.full_scale); "
                        f"lower the limit or raise the full scale")
    bits = r.number(t, "dac_bits", "export.dac_bits", 16, integer=True, minimum=2)
    from shaper.recipe.memory import MAX_GRANULARITY
    if r.number(t, "granularity", "export.granularity", 1, integer=True,
                minimum=1) > MAX_GRANULARITY:
        r.fail("export.granularity", f"must be at most {MAX_GRANULARITY} samples, got "
                                     f"{t['granularity']!r}")
    if_hz = r.number(t, "if_frequency", "export.if_frequency", 0.0, kind="frequency")
    if if_hz < 0:
        r.fail("export.if_frequency", f"must be 0 or more, got {t['if_frequency']!r}; give the "
                                      f"IF's size and choose the side of the LO with "
                                      f"export.sideband")
    if "sideband" in t and not if_hz:
        r.fail("export.sideband", "needs an IF (export.if_frequency): without one there is "
                                  "no sideband to choose")
    if abs(if_hz) >= rate / 2:
        r.fail("export.if_frequency", f"must lie below the Nyquist frequency "
                                      f"{format_quantity(rate / 2, 'Hz')} of the sample rate")
    if bits > 32:
        r.fail("export.dac_bits", f"must be at most 32, got {bits}")
    return ExportSettings(
        full_scale_hz=full, dac_bits=bits,
        granularity=r.number(t, "granularity", "export.granularity", 1, integer=True,
                             minimum=1),
        padding=r.choice({"padding": padding_word(t.get("padding", "after"))}, "padding",
                         "export.padding", PADDING),
        clip=r.flag(t, "clip", "export.clip", False),
        if_frequency_hz=if_hz,
        sideband=r.choice(t, "sideband", "export.sideband", ("lower", "upper"), "lower"),
        predistort=r.flag(t, "predistort", "export.predistort", False),
        mixer=_mixers(r, r.table(t, "mixer", "export.mixer"), system),
        codes=r.flag(t, "codes", "export.codes", False))


def _mixers(r: _Reader, t: dict, system) -> dict[str, MixerSettings]:
    """``[export.mixer.<channel>]``: the imperfections the export corrects, per I/Q channel."""
    iq = [c.name for c in system.channels if c.kind == "iq"]
    out = {}
    for name, table in t.items():
        where = f"export.mixer.{name}"
        if name not in iq:
            r.fail(where, f"no I/Q channel of that name; I/Q channels: {', '.join(iq)}")
        if not isinstance(table, dict):
            r.fail(where, f"expected a table of {', '.join(KEYS['export.mixer'])}")
        r.check_keys(table, "export.mixer", where)
        d = MixerSettings()
        values = {k: r.number(table, k, f"{where}.{k}", getattr(d, k))
                  for k in KEYS["export.mixer"]}
        if not 0.5 <= values["gain"] <= 2.0:
            r.fail(f"{where}.gain", f"expected the Q/I gain ratio between 0.5 and 2, got "
                                    f"{values['gain']}")
        if abs(values["phase_deg"]) > 30:
            r.fail(f"{where}.phase_deg", f"expected a phase error within +-30 degrees, got "
                                         f"{values['phase_deg']}")
        for k in ("offset_i", "offset_q"):
            if abs(values[k]) > 0.5:
                r.fail(f"{where}.{k}", f"expected a DC offset within +-0.5 of full scale, got "
                                       f"{values[k]}")
        out[name] = MixerSettings(**values)
    return out
