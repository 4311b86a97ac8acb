"""Filtering grids by real 2-D FFTs, in blocks that fuse with the caller's own work.

An iterative solve filters grids of the same shape dozens of times, and on 2-core machines
with a 32 MB cache these passes are bound by memory traffic, not arithmetic. A real 2-D
FFT is a real transform of every row followed by a complex transform of every column.
:class:`BlockedSpectralFilter` exposes the two halves separately:

* :meth:`~BlockedSpectralFilter.forward_rows` transforms a block of rows the caller has just
  written into a small per-thread buffer (say, weights times a residual), so the real grid
  never exists in full;
* :meth:`~BlockedSpectralFilter.filter_columns` does the forward column transforms, the
  multiplication by a transfer function and the inverse column transforms for a block of
  columns while it sits in cache;
* :meth:`~BlockedSpectralFilter.inverse_rows` returns a block of filtered rows for the
  caller to use at once.

The spectrum is touched about four times per filtering instead of about ten, and nothing is
allocated per call (fresh memory cost about as much as the transforms themselves on the
machines measured). The transforms are ``scipy.fft``'s pocketfft, called through its own
entry points, which accept output arrays; ``scipy.fft`` keeps them private, so they are
checked against the public functions once, on a small grid, and when they are missing or
disagree the public functions are used instead (same results, with temporary arrays).
"""

from __future__ import annotations

import functools
import logging

import numpy as np
import scipy.fft

from gridflex.solvers.row_blocks import block_rows, for_row_blocks, thread_count

__all__ = ["COLUMN_BLOCK", "BlockedSpectralFilter", "rfft_rows_into"]

log = logging.getLogger(__name__)

try:  # pocketfft's bindings, as scipy.fft ships them (private: checked before use)
    from scipy.fft._pocketfft import pypocketfft as _pocketfft
except ImportError:  # pragma: no cover - depends on the scipy build
    _pocketfft = None

COLUMN_BLOCK = 32
"""Spectrum columns filtered together: a block of 1728 x 32 complex64 values is 0.4 MB and
stays in a core's cache between its forward transform, the product and the inverse."""


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


def rfft_rows_into(real: np.ndarray, out: np.ndarray) -> None:
    """Real transform of each row of *real* (float64, C order) written into *out*
    (complex128, ``(rows, n // 2 + 1)``, C order), on the threads of
    :func:`~gridflex.solvers.row_blocks.thread_count`: straight into *out* through
    pocketfft's entry point when it is usable (see the module notes), else by
    ``scipy.fft.rfft`` and a copy."""
    if _direct_available():
        _pocketfft.r2c(real, (1,), True, 0, out, thread_count())
    else:
        out[...] = scipy.fft.rfft(real, axis=1, workers=thread_count())


class BlockedSpectralFilter:
    """Convolution of a grid with an even kernel, given by its (real) transfer function.

    Parameters
    ----------
    shape : tuple of int
        (ny, nx) of the data grid.
    fft_shape : tuple of int
        (ny, nx) of the transform, >= *shape*; the data are zero-padded up to it (equal to
        *shape* along periodic axes).
    dtype : numpy dtype, default float64
        float32 or float64; the spectrum is the matching complex type.

    Attributes
    ----------
    spectrum : numpy.ndarray, shape (fft_shape[0], fft_shape[1] // 2 + 1)
        The half spectrum (unnormalised forward transform, as ``scipy.fft.rfft2``).
    rows : int
        Rows per block of :meth:`forward_rows` and :meth:`inverse_rows`.

    Examples
    --------
    Smooth a grid with a three-point kernel along x (transfer 0.5 + 0.5 cos kx):

    >>> import numpy as np
    >>> from gridflex.solvers.row_blocks import for_row_blocks
    >>> grid = np.zeros((4, 8)); grid[:, 3] = 1.0
    >>> smoother = BlockedSpectralFilter(grid.shape, grid.shape)
    >>> kx = 2 * np.pi * np.fft.rfftfreq(8)
    >>> transfer = np.broadcast_to(0.5 + 0.5 * np.cos(kx), smoother.spectrum.shape).copy()
    >>> def forward(j0, j1, thread):
    ...     smoother.row_buffer(thread, j1 - j0)[...] = grid[j0:j1]
    ...     smoother.forward_rows(j0, j1, thread)
    >>> _ = for_row_blocks(4, smoother.rows, forward)
    >>> smoother.filter_columns(transfer)
    >>> out = np.empty_like(grid)
    >>> def inverse(j0, j1, thread):
    ...     out[j0:j1] = smoother.inverse_rows(j0, j1, thread)
    >>> _ = for_row_blocks(4, smoother.rows, inverse)
    >>> np.round(out[0, 1:6], 3).tolist() == [0.0, 0.25, 0.5, 0.25, 0.0]
    True
    """

    def __init__(
        self,
        shape: tuple[int, int],
        fft_shape: tuple[int, int],
        dtype: np.dtype | type = np.float64,
    ) -> None:
        self.shape = (int(shape[0]), int(shape[1]))
        self.fft_shape = (int(fft_shape[0]), int(fft_shape[1]))
        if self.fft_shape[0] < self.shape[0] or self.fft_shape[1] < self.shape[1]:
            raise ValueError(f"fft_shape {fft_shape} smaller than shape {shape}")
        dtype = np.dtype(dtype)
        if dtype not in (np.float32, np.float64):
            raise ValueError(f"BlockedSpectralFilter needs float32 or float64, got {dtype}")
        complex_type = np.complex64 if dtype == np.float32 else np.complex128
        fny, fnx = self.fft_shape
        self.spectrum = np.zeros((fny, fnx // 2 + 1), complex_type)
        self.rows = block_rows(fnx, self.shape[0])
        # per-thread real row blocks; columns beyond the data stay zero (the padding)
        self._real = [np.zeros((self.rows, fnx), dtype) for _ in range(thread_count())]
        self._direct = _direct_available()

    def row_buffer(self, thread: int, count: int) -> np.ndarray:
        """The first *count* rows (data columns only) of *thread*'s real block, to fill
        before :meth:`forward_rows`."""
        real = self._real[thread]
        nx = self.shape[1]
        if self.fft_shape[1] > nx:
            real[:count, nx:] = 0.0  # zero padding (an inverse may have left data there)
        return real[:count, :nx]

    def forward_rows(self, j0: int, j1: int, thread: int) -> None:
        """Real transform of the rows in *thread*'s block (filled through
        :meth:`row_buffer`) into spectrum rows j0..j1-1."""
        real = self._real[thread][: j1 - j0]
        if self._direct:
            _pocketfft.r2c(real, (1,), True, 0, self.spectrum[j0:j1], 1)
        else:
            self.spectrum[j0:j1] = scipy.fft.rfft(real, axis=1)

    def filter_columns(self, transfer: np.ndarray) -> None:
        """Column transforms, product with *transfer* and inverse column transforms,
        block by block of :data:`COLUMN_BLOCK` columns, shared among threads.

        Parameters
        ----------
        transfer : numpy.ndarray, shape of :attr:`spectrum`
            Real transfer function (the kernel's transform), in the spectrum's precision.
        """
        spectrum = self.spectrum
        spectrum[self.shape[0] :] = 0.0  # rows of zero padding (the last use left data)
        direct = self._direct
        ncols = spectrum.shape[1]

        def work(c0: int, c1: int, _thread: int) -> None:
            block = spectrum[:, c0:c1]
            if direct:
                _pocketfft.c2c(block, (0,), True, 0, block, 1)
                np.multiply(block, transfer[:, c0:c1], out=block)
                _pocketfft.c2c(block, (0,), False, 2, block, 1)  # divided by fft_ny
            else:
                filtered = scipy.fft.fft(block, axis=0)
                filtered *= transfer[:, c0:c1]
                block[...] = scipy.fft.ifft(filtered, axis=0)

        for_row_blocks(ncols, COLUMN_BLOCK, work)

    def inverse_rows(self, j0: int, j1: int, thread: int) -> np.ndarray:
        """Inverse real transform of spectrum rows j0..j1-1 (after :meth:`filter_columns`);
        returns the filtered data rows (a view of *thread*'s block, valid until its next
        use)."""
        real = self._real[thread][: j1 - j0]
        if self._direct:
            _pocketfft.c2r(self.spectrum[j0:j1], (1,), self.fft_shape[1], False, 2, real, 1)
        else:
            real[...] = scipy.fft.irfft(self.spectrum[j0:j1], n=self.fft_shape[1], axis=1)
        return real[:, : self.shape[1]]
