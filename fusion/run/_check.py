"""``fusion check`` of one run: every input opened far enough to know it can be read and is plausible."""

from __future__ import annotations

from ..errors import InputError
from ..io import check_load_ranges, open_frames, read_frame_times, read_image
from ._files import need_file
from ._strain import check_table_strains, read_field
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
        path = need_file(t.frames, f"{key}.thermal.frames")
        fr = open_frames(path, dtype=t.dtype, shape=t.shape, byte_order=t.byte_order, dataset=t.dataset,
                         header_bytes=t.header_bytes)
        check_frames(path, t, fr)
        parts.append(f"{fr.shape[0]} frames of {fr.shape[1]}x{fr.shape[2]} {fr.dtype}")
    else:
        need_file(t.maps, f"{key}.thermal.maps")
        maps, _, _, _ = maps_side(run)
        parts.append(f"maps {maps['T0'].shape[0]}x{maps['T0'].shape[1]}")
    if t.times is not None:
        # read, not only found: a damaged times file should fail here, not in the run
        read_frame_times(need_file(t.times, f"{key}.thermal.times"),
                         n_frames=fr.shape[0] if fr is not None else None)
    load_span = None
    if t.load is not None:
        need_file(t.load, f"{key}.thermal.load")
        sig, frequency, _, _ = load_and_frequency(run, frames=fr)
        load_span = load_range(sig, frequency)
        parts.append(f"load signal of {sig.times.size} samples at {frequency:.6g} Hz")
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
        shapes = {read_image(need_file(p, f"{key}.dic.images[{i}]")).shape for i, p in enumerate(d.images)}
        if len(shapes) != 1:
            raise InputError(d.images[0], f"the speckle images differ in size: {sorted(shapes)}")
        parts.append(f"{len(d.images)} speckle images of {shapes.pop()}")
    if d.reference_image is not None:
        read_image(need_file(d.reference_image, f"{key}.dic.reference_image"))
    return ", ".join(parts)
