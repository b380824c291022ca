"""The plume as an animated GIF (``plume.gif`` of :func:`walkers.outputs.figures.plot_results`),
drawn with the map parts of :mod:`walkers.outputs.figures`."""

from __future__ import annotations

from pathlib import Path

import numpy as np
from matplotlib.axes import Axes
from matplotlib.backends.backend_agg import FigureCanvasAgg
from PIL import Image

from walkers.outputs.figures import (
    MAX_FRAMES,
    _colour_bar,
    _draw_map,
    _draw_profile,
    _figure,
    _footer,
    _frames,
    _map_size,
    _Run,
)


def plume_animation(run: _Run, path: Path, fps: int) -> Path:
    """The plume as an animated GIF of every k-th output time (at most MAX_FRAMES frames).

    The figure is drawn in full once without the field and the title (the base), and what lies
    over the field in the panel (places, furniture, legend) once alone on a transparent canvas
    (the overlay). Each frame puts the base back, draws only the field and the title on it and
    lays the overlay over them ("over" compositing with straight alpha, Porter and Duff 1984,
    from memory): text layout, halos and the colour bar are not redone per frame."""
    conc = run.ds["concentration"]
    first = np.asarray(conc.isel(time=0).values)
    fig = _figure(*_map_size(run, 6.4))
    fig.set_dpi(80)
    ax = fig.add_subplot()
    if run.one_dimensional:
        artist = _draw_profile(run, ax, first[0])
    else:
        artist = _draw_map(run, ax, first, None)
        _colour_bar(run, fig, ax, artist)
    title = ax.set_title(f"Concentration at {run.stamps[0]}", fontsize=10)
    _footer(fig, f"{run.stamps[0]} to {run.stamps[-1]}")
    canvas = fig.canvas
    assert isinstance(canvas, FigureCanvasAgg)  # the canvas of ``figures._figure``
    canvas.draw()
    fig.set_layout_engine("none")  # freeze the layout: solving it anew for every frame is slow
    over = _drawn_over(ax, artist)
    placed = title.get_position()  # a hidden title is moved by the next draw: put it back after
    for a in (artist, title, *over):
        a.set_visible(False)
    canvas.draw()
    base = canvas.copy_from_bbox(fig.bbox)
    for a in (artist, title, *over):
        a.set_visible(True)
    title.set_position(placed)
    canvas.get_renderer().clear()  # transparent
    for a in over:
        ax.draw_artist(a)
    overlay = np.asarray(canvas.buffer_rgba(), dtype=np.float32) / 255.0
    alpha = overlay[..., 3:]
    over_part = overlay[..., :3] * alpha * 255.0
    frames = []
    stride = max(1, -(-conc.sizes["time"] // MAX_FRAMES))
    for i, field in _frames(conc, stride):
        if run.one_dimensional:
            artist.set_ydata(np.where(field[0] > 0, run.conc(field[0]), np.nan))
        else:
            artist.set_data(np.ma.masked_less_equal(run.conc(field), 0.0))
        title.set_text(f"Concentration at {run.stamps[i]}")
        canvas.restore_region(base)
        ax.draw_artist(artist)
        fig.draw_artist(title)
        below = np.asarray(canvas.buffer_rgba())[..., :3]
        rgb = over_part + below * (1.0 - alpha)
        frame = Image.fromarray(np.clip(np.rint(rgb), 0, 255).astype(np.uint8), "RGB")
        # 256 colours by the fast octree (the median cut PIL uses otherwise takes ~60 ms a frame)
        frames.append(frame.quantize(256, method=Image.Quantize.FASTOCTREE))
    frames[0].save(
        path,
        format="GIF",
        save_all=True,
        append_images=frames[1:],
        duration=int(round(1000.0 / max(1, int(fps)))),
        loop=0,
    )
    return path


def _drawn_over(ax: Axes, artist) -> list:
    """The artists of ``ax`` drawn after ``artist`` inside the panel (matplotlib draws by zorder,
    then in the order added), without the axes' ticks and labels and the title (outside it) and
    inset axes such as the colour bar (beside it)."""
    drawn = sorted(ax.get_children(), key=lambda a: a.get_zorder())  # a stable sort
    skip = (ax.xaxis, ax.yaxis, ax.patch, ax.title)
    after = drawn[drawn.index(artist) + 1 :]
    return [a for a in after if a.get_visible() and a not in skip and not isinstance(a, Axes)]
