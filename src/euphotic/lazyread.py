"""One dask task per stored chunk: read it, put it in the common orientation, decode it.

Files come with latitudes north to south, longitudes in [0, 360), values packed as integers
with ``scale_factor``/``add_offset``, units to convert and chunks that do not divide the grid.
Done as separate dask layers (a reversing ``getitem``, a fancy-index shuffle along longitude,
one elementwise pass per CF attribute) each of these costs a pass over the data, a copy and
tasks of its own. Here they are folded into the task that reads the stored chunk:

* an axis's order (latitude reversed, longitude rotated at the seam, or both) becomes a few
  *runs* of consecutive stored indices; the dask blocks along the axis are the stored chunks
  cut at the run ends, so every block is one contiguous stored range read forwards and, for a
  descending run, reversed as a view;
* fill values, ``missing_value``, scale and offset, the valid range and the unit conversion
  are applied in one compiled pass (:class:`Decoder`), with the same operations in the same
  floating type as xarray's CF decoding followed by ``where`` and the unit factor, so the
  values are identical (tested against the netCDF library's own reads).

The raw values come from a :class:`Part` per file: :class:`euphotic.chunkread.ChunkedArray`
(stored chunks read outside the HDF5 library) or the netCDF library's reads.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: More runs than this along an axis (an irregular reordering): the caller reorders with
#: xarray instead.
MAX_RUNS = 4


# ------------------------------------------------------------------------------------------
# axis orders
# ------------------------------------------------------------------------------------------


def runs_of(order: np.ndarray) -> list[tuple[int, int, int]] | None:
    """Split a permutation (output position -> stored index) into runs of consecutive stored
    indices: ``(first output position, first stored index, step +1 or -1)``, the run ending
    where the next begins. None when there are more than :data:`MAX_RUNS`."""
    order = np.asarray(order, dtype=np.int64)
    n = len(order)
    if n == 0:
        return [(0, 0, 1)]
    runs = []
    i = 0
    while i < n:
        step = 1 if i + 1 >= n or order[i + 1] - order[i] != -1 else -1
        j = i + 1
        while j < n and order[j] - order[j - 1] == step:
            j += 1
        runs.append((i, int(order[i]), step))
        if len(runs) > MAX_RUNS:
            return None
        i = j
    return runs


def axis_blocks(order: np.ndarray, stored_chunk: int, group: int = 1
                ) -> list[tuple[int, int, int, int]]:
    """Blocks along one output axis: ``(out_start, out_stop, stored_start, step)``; each lies
    in one run and covers up to ``group`` stored chunks (whole ones, except where a run
    starts or ends inside a chunk). ``order`` must split into runs (:func:`runs_of`)."""
    order = np.asarray(order, dtype=np.int64)
    n = len(order)
    runs = runs_of(order)
    if runs is None:
        raise ValueError("irregular axis order")
    bounds = [r[0] for r in runs] + [n]
    out = []
    for (o0, s0, step), o1 in zip(runs, bounds[1:], strict=True):
        o = o0
        while o < o1:
            s = s0 + step * (o - o0)
            c = s // stored_chunk
            # stored indices of this chunk reachable going `step` from s
            room = ((c + group) * stored_chunk - s if step == 1
                    else s - (c - group + 1) * stored_chunk + 1)
            stop = min(o1, o + room)
            out.append((o, stop, s, step))
            o = stop
    return out


# ------------------------------------------------------------------------------------------
# parts and the dask array
# ------------------------------------------------------------------------------------------


@dataclass
class Layout:
    """Where the output axes ``(time, lat, lon)`` are in each part's stored array.

    ``axes``: for time, lat and lon, the stored axis (time: None when the files have no time
    axis: each file is one time step); ``squeeze``: stored axes of length one to drop;
    ``lat_order``/``lon_order``: output position -> stored index; ``chunks``: the stored
    chunk length of every stored axis; ``group``: stored chunks per block along latitude and
    longitude (:func:`block_group`).
    """

    axes: tuple
    squeeze: tuple
    lat_order: np.ndarray
    lon_order: np.ndarray
    chunks: tuple
    group: tuple = (1, 1)


#: Cells a block aims at: small stored chunks (256 x 512 is common) are read in groups, so a
#: month of daily global grids is not hundreds of thousands of tiny tasks (each costs the
#: scheduler about as much as reading a small chunk). Measured on a month of 1/24-degree days
#: in 256 x 512 chunks: 2**20 cells ran 10 % faster than 2**19 but peaked at 1.04 GiB
#: instead of 0.95 GiB.
BLOCK_CELLS = 2**19


def block_group(chunk_lat: int, chunk_lon: int, n_lat: int, n_lon: int,
                target: int | None = None) -> tuple[int, int]:
    """Stored chunks per block along latitude and longitude: chunks side by side up to 1024
    columns, then rows of them, up to about ``target`` cells (:data:`BLOCK_CELLS`)."""
    target = BLOCK_CELLS if target is None else target
    if target <= 1:
        return 1, 1
    gx = max(1, min(-(-n_lon // chunk_lon), 1024 // chunk_lon))
    width = min(n_lon, gx * chunk_lon)
    gy = max(1, min(-(-n_lat // chunk_lat), round(target / width / chunk_lat)))
    return gy, gx


class _BlockRead:
    """One read task's work, its arguments held as attributes: a task made of a callable and
    no arguments costs dask nothing to parse (a month of 1/24-degree days has thousands)."""

    __slots__ = ("args",)

    def __init__(self, *args):
        self.args = args

    def __call__(self):
        return _read_block(*self.args)

    def __reduce__(self):
        return (_BlockRead, self.args)


def _read_block(part, index, reverse, transpose, squeeze, decoder):
    raw = part[index]
    if squeeze:
        raw = raw.reshape([n for i, n in enumerate(raw.shape) if i not in squeeze])
    if transpose is not None:
        raw = _transpose_block(raw, transpose)
    if reverse[1] or reverse[2]:
        raw = raw[:, ::-1 if reverse[1] else 1, ::-1 if reverse[2] else 1]
    return decoder(raw)


def dask_array(parts: list, layout: Layout, decoder, name: str):
    """A dask array ``(time, lat, lon)`` over the parts (files laid out alike), one after
    the other along time; every block is one task reading its stored range of one part and
    passing it through ``decoder`` (e.g. :class:`euphotic.cfdecode.Decoder`; its ``dtype`` is
    the result's)."""
    import dask.array as da
    from dask.highlevelgraph import HighLevelGraph

    try:
        from dask._task_spec import Task
    except ImportError:  # pragma: no cover - older dask: legacy tuples
        Task = None

    t_ax, y_ax, x_ax = layout.axes
    ndim = len(layout.chunks)
    shape = parts[0].shape
    n_t = shape[t_ax] if t_ax is not None else 1
    t_chunk = layout.chunks[t_ax] if t_ax is not None else 1
    t_blocks = [(a, min(a + t_chunk, n_t)) for a in range(0, n_t, t_chunk)]
    y_blocks = axis_blocks(layout.lat_order, layout.chunks[y_ax], layout.group[0])
    x_blocks = axis_blocks(layout.lon_order, layout.chunks[x_ax], layout.group[1])
    # stored axes left after squeezing, in stored order -> transpose to (time, lat, lon)
    kept = [i for i in range(ndim) if i not in layout.squeeze]
    if t_ax is None:
        order_kept = [kept.index(y_ax), kept.index(x_ax)]
    else:
        order_kept = [kept.index(t_ax), kept.index(y_ax), kept.index(x_ax)]
    transpose = None if order_kept == sorted(order_kept) and t_ax is not None else order_kept
    dsk = {}
    for p, part in enumerate(parts):
        for ti, (t0, t1) in enumerate(t_blocks):
            for yi, (y0, y1, ys, ystep) in enumerate(y_blocks):
                for xi, (x0, x1, xs, xstep) in enumerate(x_blocks):
                    index = [slice(0, 1)] * ndim
                    if t_ax is not None:
                        index[t_ax] = slice(t0, t1)
                    index[y_ax] = (slice(ys, ys + (y1 - y0)) if ystep == 1
                                   else slice(ys - (y1 - y0) + 1, ys + 1))
                    index[x_ax] = (slice(xs, xs + (x1 - x0)) if xstep == 1
                                   else slice(xs - (x1 - x0) + 1, xs + 1))
                    key = (name, p * len(t_blocks) + ti, yi, xi)
                    args = (part, tuple(index), (False, ystep < 0, xstep < 0),
                            _with_time(transpose, t_ax), layout.squeeze, decoder)
                    # a task spec as dask builds it (no conversion of a legacy tuple later)
                    dsk[key] = (Task(key, _BlockRead(*args)) if Task is not None
                                else (_read_block, *args))
    chunks = ((tuple(b - a for a, b in t_blocks)) * len(parts),
              tuple(b[1] - b[0] for b in y_blocks), tuple(b[1] - b[0] for b in x_blocks))
    graph = HighLevelGraph.from_collections(name, dsk, dependencies=[])
    return da.Array(graph, name, chunks=chunks, dtype=np.dtype(decoder.dtype))


def _with_time(transpose, t_ax):
    """Without a stored time axis the block gains a leading one: (lat, lon) -> (1, lat, lon)."""
    if t_ax is not None:
        return transpose
    return _AddTime(tuple(transpose))


class _AddTime(tuple):
    """Marker: transpose the (lat, lon) block, then add a leading time axis of length one."""


def _transpose_block(raw, transpose):
    if isinstance(transpose, _AddTime):
        return raw.transpose(tuple(transpose))[np.newaxis]
    return raw.transpose(transpose)


def held_array(arr: np.ndarray, chunks, prefix: str):
    """A dask array over ``arr``, an array this process holds for the whole run (masks): its
    blocks are read-only views of it. ``dask.array.from_array`` copies the whole array first
    and hashes it for a name, which costs a second at start for a 1/24-degree grid's masks."""
    import uuid

    import dask.array as da
    from dask.array.core import normalize_chunks, slices_from_chunks

    chunks = normalize_chunks(chunks, arr.shape, dtype=arr.dtype)
    view = arr.view()
    view.flags.writeable = False  # a task that wrote into a block would fail, not corrupt
    name = f"{prefix}-{uuid.uuid4().hex}"
    dsk = {(name, *idx): view[slc] for idx, slc in zip(
        np.ndindex(*(len(c) for c in chunks)), slices_from_chunks(chunks), strict=True)}
    return da.Array(dsk, name, chunks, dtype=arr.dtype)
