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

    ``layout(*args)`` (the arguments after the first two, keywords turned positional)
    tells the result's keys and leading dims without computing anything, and which of
    ``args`` broadcast against the cells; the others are passed unchanged.
    """

    def decorate(fn: Callable) -> Callable:
        sig = inspect.signature(fn)

        @functools.wraps(fn)
        def wrapper(*call_args: Any, **call_kwargs: Any):
            bound = sig.bind(*call_args, **call_kwargs)
            fit, damping_depth_m, *args = bound.args
            kwargs = bound.kwargs
            spec = layout(*args, **kwargs)
            cell_values = (*fit, damping_depth_m, *(args[i] for i in spec.cell_args
                                                    if i < len(args)))
            kinds = {_kind(v) for v in cell_values}
            if "xarray" in kinds:
                return _with_xarray(wrapper, spec, fit, damping_depth_m, args, kwargs)
            if "dask" in kinds:
                return _with_dask(fn, spec, fit, damping_depth_m, args, kwargs)
            return fn(fit, damping_depth_m, *args, **kwargs)

        return wrapper

    return decorate


def _with_dask(fn, spec, fit, damping_depth_m, args, kwargs):
    import dask.array as da

    cells_of = [i in spec.cell_args and np.ndim(a) > 0 for i, a in enumerate(args)]
    given = [fit.mean, damping_depth_m] + [a for a, c in zip(args, cells_of, strict=True) if c]
    h = np.shape(fit.cos_coef)[0]
    shape = np.broadcast_shapes(*(np.shape(v) for v in given), np.shape(fit.cos_coef)[1:],
                                np.shape(fit.sin_coef)[1:])
    full = [da.broadcast_to(da.asarray(v), shape) for v in given]
    # the chunks of the first input that came lazy (not of a broadcast numpy array)
    lazy = [f for f, v in zip(full, given, strict=True) if _kind(v) == "dask"]
    if not lazy:  # only the coefficients are lazy: chunk like the first of them
        lazy = [da.broadcast_to(da.asarray(fit.cos_coef), (h, *shape))[0]]
    chunks = lazy[0].chunks
    mean, dd, *extra = (f.rechunk(chunks) for f in full)
    cos_c, sin_c = (da.broadcast_to(da.asarray(v), (h, *shape)).rechunk(((h,), *chunks))
                    for v in (fit.cos_coef, fit.sin_coef))

    def block(mean_b, cos_b, sin_b, dd_b, *extra_b):
        it = iter(extra_b)
        filled = [next(it) if c else a for a, c in zip(args, cells_of, strict=True)]
        out = fn(HarmonicFit(mean_b, cos_b, sin_b), dd_b, *filled, **kwargs)
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


def _with_xarray(wrapper, spec, fit, damping_depth_m, args, kwargs):
    """Broadcast the xarray inputs by dim name, hand their data (in one dim order) to the
    numpy/dask path, and label the results with those dims and coordinates. Plain arrays
    among the inputs broadcast against the cells by position, as in numpy."""
    import xarray as xr

    cells = {"mean": fit.mean, "dd": damping_depth_m}
    cells.update({i: args[i] for i in spec.cell_args if i < len(args)})
    coefs = {"cos": fit.cos_coef, "sin": fit.sin_coef}
    stand_ins = [v for v in cells.values() if _kind(v) == "xarray"]
    cell_dim_names = {d for v in stand_ins for d in v.dims}

    def harmonic_dim(v) -> str:  # "harmonic", else the one dim the cells lack, else first
        others = [d for d in v.dims if d not in cell_dim_names]
        return "harmonic" if "harmonic" in v.dims else (others[0] if len(others) == 1
                                                          else v.dims[0])

    stand_ins += [v.isel({harmonic_dim(v): 0}, drop=True) for v in coefs.values()
                  if _kind(v) == "xarray"]
    template = xr.broadcast(*stand_ins)[0] if len(stand_ins) > 1 else stand_ins[0]
    template = xr.zeros_like(template)  # dims, shape and the merged cell coordinates
    dims = template.dims
    lead_names = tuple(name if name not in dims else f"{name}_out" for name, _ in spec.leading)

    def cell_data(v):
        return v.broadcast_like(template).transpose(*dims).data if _kind(v) == "xarray" else v

    def coef_data(v):
        if _kind(v) != "xarray":
            return v
        return v.broadcast_like(template).transpose(harmonic_dim(v), *dims).data

    plain = {k: cell_data(v) for k, v in cells.items()}
    new_args = [plain.get(i, a) for i, a in enumerate(args)]
    out = wrapper(HarmonicFit(plain["mean"], coef_data(coefs["cos"]), coef_data(coefs["sin"])),
                  plain["dd"], *new_args, **kwargs)
    coords = dict(template.coords)
    coords.update({n: (n, np.asarray(values))
                   for n, (_, values) in zip(lead_names, spec.leading, strict=True)})

    def wrap(values):
        if np.ndim(values) != len(lead_names) + len(dims):  # plain arrays added dims
            return values
        return xr.DataArray(values, dims=lead_names + dims, coords=coords)

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
                if any(_kind(v) != "xarray" and np.ndim(v) > 0 for v in cells.values()):
                    # plain arrays broadcast by position: do the same with the xarray data
                    return call(*(v.data if _kind(v) == "xarray" else v
                                  for v in cells.values()))
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
