"""``fusion check`` of one run: every input opened far enough to know it can be read and is plausible."""

from __future__ import annotations

from ..errors import InputError
from ..io import check_load_ranges, image_shape, read_image
from ._files import need_file
from ._inputs import frame_times, images_within_budget, open_thermal_frames, speckle_images
from ._strain import check_region, check_table_strains, read_field
from ._thermal import check_frames, load_and_frequency, load_range, maps_side

__all__ = ["check_run_inputs"]


def check_run_inputs(cfg, run, *, key) -> str:
    """Open every input of a run far enough to check it; return a one-line description.

    Beyond reading, the checks a run makes before its heavy steps run here too: a sample
    of the frames (layout, temperatures), the load signal against the frames' clock and
    the configured frequency, the magnitudes of maps and strain tables, and the geometry
    of every correlation field.
    """
    t, d = run.thermal, run.dic
    parts = []
    fr = None
    if t.frames is not None:
        fr = open_thermal_frames(t, key=f"{key}.thermal", budget=cfg.compute.memory_budget)
        check_frames(t.frames, t, fr)
        seq = getattr(fr, "sequence", None)
        where = f" in {len(seq)} {seq.kind} files" if seq is not None else ""
        parts.append(f"{fr.shape[0]} frames of {fr.shape[1]}x{fr.shape[2]} {fr.dtype}{where}")
    else:
        need_file(t.maps, f"{key}.thermal.maps")
        maps, _, _, _ = maps_side(run)
        parts.append(f"maps {maps['T0'].shape[0]}x{maps['T0'].shape[1]}")
    sig = load_span = None
    if t.load is not None:
        need_file(t.load, f"{key}.thermal.load")
        sig, frequency, _, _ = load_and_frequency(run, frames=fr)
        load_span = load_range(sig, frequency)
        parts.append(f"load signal of {sig.times.size} samples at {frequency:.6g} Hz")
    if fr is not None:
        # read, not only found: damaged or mismatched frame times should fail here, not in the run
        frame_times(t, fr, sig)
    if d.loads is not None and load_span is not None:
        check_load_ranges(load_span, d.loads, where=t.load)
    if d.strain_ranges is not None:
        f = read_field(d.strain_ranges, d, f"{key}.dic.strain_ranges")
        check_table_strains(f, d.strain_ranges, d)
        parts.append(f"strain ranges at {f.x.size} points")
    for name in ("states", "series"):
        for i, p in enumerate(getattr(d, name) or ()):
            f = read_field(p, d, f"{key}.dic.{name}[{i}]")
        if getattr(d, name):
            parts.append(f"{len(getattr(d, name))} displacement fields of {f.x.size} points")
    if d.images is not None:
        images = speckle_images(d)
        if d.load_log is not None and load_span is not None:
            check_load_ranges(load_span, images.loads, where=d.load_log, what="the load log's loads")
        first = image_shape(need_file(images.paths[0], f"{key}.dic.images"))
        images_within_budget(images.paths[0], first, cfg.compute.memory_budget)
        first = read_image(images.paths[0]).shape
        for p in images.paths[1:]:
            shape = read_image(need_file(p, f"{key}.dic.images")).shape
            if shape != first:
                raise InputError(p, f"is a {shape[0]}x{shape[1]} image, the reference {images.paths[0].name} "
                                 f"{first[0]}x{first[1]}: every speckle image must have one size; "
                                 "an image of another camera setting (window, binning) or of another run?")
        check_region(d, first, images.paths[0])
        parts.append(f"{len(images.paths)} speckle images of {first}")
    if d.reference_image is not None:
        read_image(need_file(d.reference_image, f"{key}.dic.reference_image"))
    return ", ".join(parts)
