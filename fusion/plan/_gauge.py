"""``fusion gauge``: spatial resolution and noise floor of correlation settings, as text."""

from __future__ import annotations

from ..dic import DEFAULT_STEP, DEFAULT_SUBSET, DEFAULT_WINDOW, recommend_setting, setting_table
from ..dic._settings import TYPICAL, feature_wavelength
from ..errors import ConfigError
from ..io import read_image
from ._response import PLAN_CAUTION

__all__ = ["gauge_table", "gauge_command"]


def gauge_table(radius, noise, *, image=None, contrast=None, speckle_size=4.0, strain=2e-3,
                target=0.1, pixel_size=None, rows=12) -> str:
    """Spatial resolution and noise floor of correlation settings for a feature: plain text.

    Parameters
    ----------
    radius : float
        Feature radius (a hole's), px of the visible camera.
    noise : float
        Grey-level noise std of each speckle image (grey levels).
    image : (H, W) array_like, optional
        The reference speckle image; without it a rendered pattern of ``speckle_size`` px
        whose grey levels have the std ``contrast`` (default 50).
    strain : float
        The strain range to be measured (1); the noise target is ``target * strain``.
    pixel_size : float, optional
        mm per px, to show lengths in mm as well.
    rows : int
        Settings listed (the best gains within the noise target, then the others).

    Returns
    -------
    str
        The feature's wavelength; for each setting the VSG, the wavelengths of 50 % and
        90 % gain, the gain at the feature and the noise floor; the recommendation and
        why; the defaults' line.
    """
    contrast = TYPICAL["contrast"] if contrast is None else contrast
    table = setting_table(radius, noise, image=image, contrast=contrast, speckle_size=speckle_size)
    best, why = recommend_setting(table, strain=strain, target=target)
    limit = target * strain
    ranked = sorted(table, key=lambda r: (r["noise_floor"] > limit, -r["gain"], r["noise_floor"]))
    default = next((r for r in table if (r["subset"], r["step"], r["window"])
                    == (DEFAULT_SUBSET, DEFAULT_STEP, DEFAULT_WINDOW)), None)
    unit = f" ({pixel_size:g} mm/px)" if pixel_size else ""
    source = "the image given" if image is not None else (f"a rendered pattern of {speckle_size:g} px "
                                                          f"speckles, grey-level std {contrast:g}")
    lines = [
        f"Correlation settings for a feature of radius {radius:g} px{unit}: it needs the wavelength "
        f"{feature_wavelength(radius):g} px resolved (gain >= 0.9).",
        f"Image noise {noise:g} grey levels on {source}; noise target {target:.0%} of "
        f"{strain * 1e6:.0f} microstrain = {limit * 1e6:.0f} microstrain.",
        f"{'subset':>7}{'step':>6}{'window':>8}{'VSG px':>8}{'50% at px':>11}{'90% at px':>11}"
        f"{'gain':>7}{'noise floor (microstrain)':>27}",
    ]

    def line(r, mark=""):
        return (f"{r['subset']:>7}{r['step']:>6}{r['window']:>8}{r['vsg_px']:>8.0f}"
                f"{r['wavelength_gain50_px']:>11.0f}{r['wavelength_gain90_px']:>11.0f}{r['gain']:>7.2f}"
                f"{r['noise_floor'] * 1e6:>27.0f}{mark}")

    for r in ranked[:rows]:
        lines.append(line(r, "  <- recommended" if r is best else ""))
    if best not in ranked[:rows]:
        lines.append(line(best, "  <- recommended"))
    lines.append(f"Recommended: subset {best['subset']}, step {best['step']}, strain window "
                 f"{best['window']}: {why}.")
    if default is not None:
        lines.append("Defaults (config and fusion.dic.correlate):")
        lines.append(line(default))
    lines.append("Gains are modelled for complete windows (box average over the subset, then the "
                 "slope fit over the window); near holes and edges the fits are one-sided, noisier, "
                 "and their stds say so. The noise floor is the strain std of a complete window.")
    lines.append(PLAN_CAUTION)
    return "\n".join(lines)


def gauge_command(*, radius, noise, image=None, contrast=None, speckle_size=4.0, strain=2e-3,
                  target=0.1, pixel_size=None) -> str:
    """``fusion gauge``: :func:`gauge_table`, reading the reference image when a path is given."""
    img = None
    if image is not None:
        img = read_image(image)
    try:
        return gauge_table(radius, noise, image=img, contrast=contrast, speckle_size=speckle_size,
                           strain=strain, target=target, pixel_size=pixel_size)
    except ValueError as e:
        raise ConfigError("gauge", str(e)) from e
