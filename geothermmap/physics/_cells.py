"""Array containers for the functions of the physics package that run compiled kernels.

The numba kernels need whole numpy arrays. :func:`cellwise` lets a function written for
numpy (``fn(fit, damping_depth_m, *args)``, one result per cell) also take dask arrays,
which stay lazy (the function runs chunk by chunk of the cells, the harmonics axis in
one chunk), and xarray objects, whose cell dims and coordinates the results keep. The
formulas stay in the modules that use it; this module only moves arrays around.
"""

from __future__ import annotations

import functools
import inspect
from collections.abc import Callable
from typing import Any, NamedTuple

import numpy as np

from geothermmap.physics.harmonics import HarmonicFit


class Layout(NamedTuple):
    """What a cellwise function returns for the given arguments.

    ``keys``: names of a dict of results, or None for one array; ``leading``: dims before
    the cell dims, as (name, coordinate values) pairs (e.g. ``("depth", depths_m)``);
    ``cell_args``: positions (among the arguments after the first two) of arguments that
    broadcast against the cells, e.g. a threshold map.
    """

    keys: tuple[str, ...] | None
    leading: tuple[tuple[str, np.ndarray], ...] = ()
    cell_args: tuple[int, ...] = ()


def _kind(value: Any) -> str:
    return type(value).__module__.split(".")[0]


def cellwise(layout: Callable[..., Layout]) -> Callable:
    """Decorator: dask and xarray inputs for ``fn(fit, damping_depth_m, *args, **kw)``.

    ``layout(*args, **kw)`` (the arguments after the first two) tells the result's keys
    and leading dims without computing anything, and which of ``args`` broadcast against
    the cells; the others are passed unchanged.
    """

    def decorate(fn: Callable) -> Callable:
        @functools.wraps(fn)
        def wrapper(fit: HarmonicFit, damping_depth_m: Any, *args: Any, **kwargs: Any):
            values = (*fit, damping_depth_m, *args)
            if any(_kind(v) == "xarray" for v in values):
                return _with_xarray(wrapper, layout, fit, damping_depth_m, args, kwargs)
            if any(_kind(v) == "dask" for v in values):
                return _with_dask(fn, layout, fit, damping_depth_m, args, kwargs)
            return fn(fit, damping_depth_m, *args, **kwargs)

        return wrapper

    return decorate


def _with_dask(fn, layout, fit, damping_depth_m, args, kwargs):
    import dask.array as da

    spec = layout(*args, **kwargs)
    cells_of = [i in spec.cell_args and np.ndim(a) > 0 for i, a in enumerate(args)]
    mean, cos_c, sin_c, dd = (da.asarray(v) for v in (*fit, damping_depth_m))
    extra = [da.asarray(a) for a, is_cell in zip(args, cells_of, strict=True) if is_cell]
    h = cos_c.shape[0]
    shape = np.broadcast_shapes(mean.shape, cos_c.shape[1:], sin_c.shape[1:], dd.shape,
                                *(e.shape for e in extra))
    mean = da.broadcast_to(mean, shape)
    chunks = mean.chunks
    dd, *extra = (da.broadcast_to(v, shape).rechunk(chunks) for v in (dd, *extra))
    cos_c, sin_c = (da.broadcast_to(v, (h, *shape)).rechunk(((h,), *chunks))
                    for v in (cos_c, sin_c))

    def block(mean_b, cos_b, sin_b, dd_b, *extra_b):
        it = iter(extra_b)
        full = [next(it) if is_cell else a for a, is_cell in zip(args, cells_of, strict=True)]
        out = fn(HarmonicFit(mean_b, cos_b, sin_b), dd_b, *full, **kwargs)
        out = out if spec.keys is None else np.stack([out[k] for k in spec.keys])
        return np.asarray(out, dtype=np.float64)

    cells = tuple(f"c{i}" for i in range(len(shape)))
    sizes = ((len(spec.keys),) if spec.keys is not None else ()) + tuple(
        len(values) for _, values in spec.leading)
    lead = tuple(f"l{i}" for i in range(len(sizes)))
    pairs = [mean, cells, cos_c, ("h", *cells), sin_c, ("h", *cells), dd, cells]
    for e in extra:
        pairs += [e, cells]
    out = da.blockwise(block, lead + cells, *pairs, dtype=np.float64, concatenate=True,
                       new_axes=dict(zip(lead, sizes, strict=True)))
    return out if spec.keys is None else {k: out[i] for i, k in enumerate(spec.keys)}


def _with_xarray(wrapper, layout, fit, damping_depth_m, args, kwargs):
    import xarray as xr

    template = next(v for v in (damping_depth_m, fit.mean, *args, *fit)
                    if _kind(v) == "xarray")
    cell_dims = template.dims if template is not fit.cos_coef and template is not \
        fit.sin_coef else template.dims[1:]

    def data(v):
        return v.data if _kind(v) == "xarray" else v

    out = wrapper(HarmonicFit(*(data(v) for v in fit)), data(damping_depth_m),
                  *(data(a) for a in args), **kwargs)
    spec = layout(*args, **kwargs)
    dims = tuple(name for name, _ in spec.leading) + tuple(cell_dims)
    coords = {name: c for name, c in template.coords.items()
              if set(template.coords[name].dims) <= set(cell_dims)}
    coords.update({name: (name, np.asarray(values)) for name, values in spec.leading})

    def wrap(values):
        return xr.DataArray(values, dims=dims, coords=coords)

    return wrap(out) if spec.keys is None else {k: wrap(v) for k, v in out.items()}


def elementwise(*cell_params: str, dtype: Any = np.float64) -> Callable:
    """Decorator: dask and xarray inputs for a numpy function that works value by value.

    ``cell_params``: the parameters that are arrays of values (default: all); the others
    (e.g. a list of thresholds) are passed unchanged. Dask arrays are broadcast together
    and the function runs block by block (lazy); xarray objects go through
    ``xarray.apply_ufunc`` (dims and coordinates kept, dask inside kept lazy).
    """

    def decorate(fn: Callable) -> Callable:
        sig = inspect.signature(fn)
        names = cell_params or tuple(sig.parameters)

        @functools.wraps(fn)
        def wrapper(*args: Any, **kwargs: Any):
            bound = sig.bind(*args, **kwargs)
            cells = {k: v for k, v in bound.arguments.items() if k in names and v is not None}
            kinds = {_kind(v) for v in cells.values()}
            if not kinds & {"xarray", "dask"}:
                return fn(*args, **kwargs)
            keys = list(cells)

            def call(*values: Any):
                return wrapper(**{**bound.arguments, **dict(zip(keys, values, strict=True))})

            if "xarray" in kinds:
                import xarray as xr

                return xr.apply_ufunc(call, *cells.values(), dask="allowed")
            import dask.array as da

            arrays = da.broadcast_arrays(*(da.asarray(v) for v in cells.values()))
            lazy = next(a for a, v in zip(arrays, cells.values(), strict=True)
                        if _kind(v) == "dask")  # its chunks, not those of a broadcast scalar
            arrays = [a.rechunk(lazy.chunks) for a in arrays]
            return da.map_blocks(call, *arrays, dtype=dtype)

        return wrapper

    return decorate
