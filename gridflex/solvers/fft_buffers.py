"""Real 2-D FFTs into arrays allocated once.

An iterative solve transforms grids of the same shape dozens of times. ``scipy.fft``
returns a new array from every call, and on the machines this package is measured on fresh
memory costs about as much as the transform itself (page faults: a 1728² float64 FFT pair
took 0.029 s into reused arrays against 0.038-0.070 s through the allocating functions).
:class:`RealFFT2` owns its real and complex arrays and transforms between them in place:
the rows by a real transform, then the columns by a complex one (the same work as
``rfft2``), with ``scipy.fft``'s pocketfft on all cores.

It calls pocketfft's own entry points, which accept an output array; ``scipy.fft`` keeps
them private, so they are checked against the public functions once, on a small grid, and
when they are missing or disagree the public functions are used instead (with a copy).
"""

from __future__ import annotations

import functools
import logging
import os

import numpy as np
import scipy.fft

__all__ = ["RealFFT2"]

log = logging.getLogger(__name__)

try:  # pocketfft's bindings, as scipy.fft ships them (private: checked before use)
    from scipy.fft._pocketfft import pypocketfft as _pocketfft
except ImportError:  # pragma: no cover - depends on the scipy build
    _pocketfft = None


def _workers() -> int:
    return os.cpu_count() or 1


@functools.cache
def _direct_available() -> bool:
    """Whether pocketfft's bindings with output arrays give the public functions' result."""
    if _pocketfft is None:
        return False
    try:
        rng = np.random.default_rng(0)
        real = rng.standard_normal((6, 10))
        spectrum = np.empty((6, 6), np.complex128)
        _pocketfft.r2c(real, (1,), True, 0, spectrum, 1)
        _pocketfft.c2c(spectrum, (0,), True, 0, spectrum, 1)
        ok = np.allclose(spectrum, scipy.fft.rfft2(real), rtol=1e-12, atol=1e-12)
        back = np.empty_like(real)
        _pocketfft.c2c(spectrum, (0,), False, 2, spectrum, 1)
        _pocketfft.c2r(spectrum, (1,), real.shape[1], False, 2, back, 1)
        ok = ok and np.allclose(back, real, rtol=1e-12, atol=1e-12)
    except Exception as exc:  # any failure: use the public functions  # noqa: BLE001
        log.debug("pocketfft bindings not usable (%s); using scipy.fft", exc)
        return False
    return bool(ok)


class RealFFT2:
    """Forward and inverse real 2-D FFT of one shape and precision, between owned arrays.

    Parameters
    ----------
    shape : tuple of int
        (ny, nx) of the real grid.
    dtype : numpy dtype, default float64
        float32 or float64; the spectrum is the matching complex type.

    Attributes
    ----------
    real : numpy.ndarray, shape (ny, nx)
        The real grid: fill it, then :meth:`forward`; :meth:`inverse` writes it.
    spectrum : numpy.ndarray, shape (ny, nx // 2 + 1)
        The half spectrum (unnormalised forward transform, as ``scipy.fft.rfft2``).

    Examples
    --------
    >>> import numpy as np
    >>> fft = RealFFT2((4, 6))
    >>> fft.real[:] = np.arange(24.0).reshape(4, 6)
    >>> fft.forward()
    >>> float(fft.spectrum[0, 0].real)
    276.0
    >>> fft.inverse()
    >>> float(fft.real[3, 5])
    23.0
    """

    def __init__(self, shape: tuple[int, int], dtype: np.dtype | type = np.float64) -> None:
        self.shape = (int(shape[0]), int(shape[1]))
        dtype = np.dtype(dtype)
        if dtype not in (np.float32, np.float64):
            raise ValueError(f"RealFFT2 needs float32 or float64, got {dtype}")
        self.real = np.zeros(self.shape, dtype)
        complex_type = np.complex64 if dtype == np.float32 else np.complex128
        self.spectrum = np.zeros((self.shape[0], self.shape[1] // 2 + 1), complex_type)
        self._direct = _direct_available()

    def forward(self) -> None:
        """:attr:`spectrum` = rfft2(:attr:`real`)."""
        if self._direct:
            workers = _workers()
            _pocketfft.r2c(self.real, (1,), True, 0, self.spectrum, workers)
            _pocketfft.c2c(self.spectrum, (0,), True, 0, self.spectrum, workers)
        else:
            self.spectrum[...] = scipy.fft.rfft2(self.real, workers=-1)

    def inverse(self) -> None:
        """:attr:`real` = irfft2(:attr:`spectrum`); the spectrum is overwritten."""
        if self._direct:
            workers = _workers()
            # normalisation 2 divides by the length of the transformed axis: ny, then nx
            _pocketfft.c2c(self.spectrum, (0,), False, 2, self.spectrum, workers)
            _pocketfft.c2r(self.spectrum, (1,), self.shape[1], False, 2, self.real, workers)
        else:
            self.real[...] = scipy.fft.irfft2(self.spectrum, s=self.shape, workers=-1)
