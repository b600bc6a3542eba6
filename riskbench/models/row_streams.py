"""Random numbers of a prediction row that depend only on the model's seed and the row's own data.

A Monte Carlo prediction drawn from one stream per call changes when other rows are predicted in the same
call (the stream is shared out in row order). Here each row gets its own generator, keyed by what the
prediction depends on: the row's fixed values (landmark, covariates) and its records (its measurement
history up to the landmark). The patient id is left out on purpose: a run replaces ids by pseudonyms and a
bootstrap copy adds a suffix, and the same data must give the same risk under any name.

The 256-bit BLAKE2b digest of ``(seed, stream, the row's values rounded to 1e-9)`` is the state and
increment of a PCG64 generator (O'Neill 2014, the generator behind ``numpy.random.default_rng``). BLAKE2b is
stable across processes (Python's ``hash()`` is salted per process) and mixes nearby keys as well as
``numpy.random.SeedSequence`` does; setting the state directly is about four times faster than building a
``SeedSequence`` per row.
"""

from __future__ import annotations

import hashlib

import numpy as np

__all__ = ["row_keys", "row_normals"]

_DECIMALS = 9


def _canonical(values: np.ndarray) -> np.ndarray:
    # rounded so that one value reached by two computing paths names the same row; + 0.0 folds -0.0 into 0.0
    return np.round(np.asarray(values, dtype=float), _DECIMALS) + 0.0


def row_keys(columns: np.ndarray, group: np.ndarray, records: np.ndarray) -> list[bytes]:
    """The identity of each row: its fixed values and its records, as bytes.

    Parameters
    ----------
    columns : ndarray (n, p)
        Each row's fixed values (e.g. landmark in years and centred covariates).
    group : ndarray (N,) of int
        Row index of each record, sorted (e.g. ``History.patient`` of the prediction rows).
    records : ndarray (N, q)
        The records (e.g. measurement time in years and value).

    Returns
    -------
    list of bytes, one per row.
    """
    columns = _canonical(columns).reshape(len(columns), -1)
    records = _canonical(records).reshape(len(group), -1)
    bounds = np.searchsorted(np.asarray(group), np.arange(len(columns) + 1))
    return [columns[i].tobytes() + b"\x1f" + records[bounds[i] : bounds[i + 1]].tobytes() for i in range(len(columns))]


def row_normals(seed: int, keys: list[bytes], shape: tuple[int, ...], stream: int = 0) -> np.ndarray:
    """Standard normal draws of ``shape`` for every row, each from the row's own generator.

    Parameters
    ----------
    seed : int
        The model's seed (``random_state``).
    keys : list of bytes
        Row identities from :func:`row_keys`.
    shape : tuple of int
        Shape of one row's block (e.g. ``(draws, 2)``).
    stream : int
        Index of an independent stream of the same row (e.g. one per parameter draw); 0 for the first.

    Returns
    -------
    ndarray (len(keys), *shape)
    """
    out = np.empty((len(keys), *shape))
    generator = np.random.Generator(np.random.PCG64(0))
    prefix = f"{int(seed)}\x1f{int(stream)}\x1f".encode()
    for i, key in enumerate(keys):
        digest = hashlib.blake2b(prefix + key, digest_size=32).digest()
        generator.bit_generator.state = {
            "bit_generator": "PCG64",
            "state": {"state": int.from_bytes(digest[:16], "little"), "inc": int.from_bytes(digest[16:], "little") | 1},
            "has_uint32": 0,
            "uinteger": 0,
        }
        out[i] = generator.standard_normal(shape)
    return out
