"""``fusion check`` of one run: every input opened far enough to know it can be read."""

from __future__ import annotations

from ..errors import InputError
from ..io import open_frames, read_dic_field, read_frame_times, read_image, read_load_signal, read_thermal_maps
from ._files import need_file

__all__ = ["check_run_inputs"]


def check_run_inputs(cfg, run, *, key) -> str:
    """Open every input of a run far enough to check it; return a one-line description."""
    t, d = run.thermal, run.dic
    parts = []
    if t.frames is not None:
        fr = open_frames(need_file(t.frames, f"{key}.thermal.frames"), dtype=t.dtype, shape=t.shape,
                         byte_order=t.byte_order, dataset=t.dataset, header_bytes=t.header_bytes)
        parts.append(f"{fr.shape[0]} frames of {fr.shape[1]}x{fr.shape[2]} {fr.dtype}")
    else:
        maps = read_thermal_maps(need_file(t.maps, f"{key}.thermal.maps"))
        parts.append(f"maps {maps['T0'].shape[0]}x{maps['T0'].shape[1]}")
    if t.load is not None:
        sig = read_load_signal(need_file(t.load, f"{key}.thermal.load"), time_column=t.time_column,
                               load_column=t.load_column)
        parts.append(f"load signal of {sig.times.size} samples")
    if t.times is not None:
        # read, not only found: a damaged times file should fail here, not in the run
        read_frame_times(need_file(t.times, f"{key}.thermal.times"),
                         n_frames=fr.shape[0] if t.frames is not None else None)
    if d.strain_ranges is not None:
        f = read_dic_field(need_file(d.strain_ranges, f"{key}.dic.strain_ranges"), columns=d.columns,
                           coordinates=d.coordinates, y_axis=d.effective_y_axis, shear=d.shear)
        parts.append(f"strain ranges at {f.x.size} points")
    for name in ("states", "series"):
        for i, p in enumerate(getattr(d, name) or ()):
            f = read_dic_field(need_file(p, f"{key}.dic.{name}[{i}]"), columns=d.columns,
                               coordinates=d.coordinates, y_axis=d.effective_y_axis, shear=d.shear)
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
