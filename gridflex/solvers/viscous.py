"""Time-dependent plate response, one Fourier mode at a time.

Both models relax each wavenumber k of the deflection towards the elastic
equilibrium W_eq = Q / beta(k), with beta(k) = D k⁴ + Δρ g (w and q positive down):

    dW/dt = (Q / beta − W) / tau(k)

* ``"half-space"`` — elastic plate over a Newtonian viscous half-space of viscosity
  eta (Bueler, Lingle & Brown 2007, *Ann. Glaciol.* 46, 97–105, from the model of
  Lingle & Clark 1985 and Cathles 1975):
  2 eta |∇| ∂w/∂t + Δρ g w + D ∇⁴w = q, so tau(k) = 2 eta k / beta(k).
* ``"relaxing"`` — elastic lithosphere over a relaxing asthenosphere with a single
  relaxation time (Le Meur & Huybrechts 1996, *Ann. Glaciol.* 23, 309–317):
  dw/dt = (w_eq − w) / tau with tau the same for every wavenumber.

Over a step of length dt each mode is advanced exactly (no stability limit) for a
load that is constant over the step (``"previous"``) or varies linearly between the
loads at the two ends (``"linear"``). With E = exp(−dt/tau) and
phi = tau (1 − E) / dt:

    previous:  W1 = E W0 + (1 − E) Q0 / beta
    linear:    W1 = E W0 + (phi − E) Q0 / beta + (1 − phi) Q1 / beta

(the second is the exact solution of the linear ODE for a load linear in time).
At k = 0 the half-space has tau = 0 and the longest wavelengths relax fastest, which a
periodic grid cannot represent (its k = 0 mode would make the whole padded domain follow
the mean load at once). With padding (``periodic=False``) the net force, first and second
moments of the load are therefore taken out of the spectrum and their response is computed on
the infinite plane (:mod:`gridflex.solvers.far_field`); the periodic part then has no
k = 0 mode at all. A periodic domain keeps the periodic answer (its mean sinks at once).

Everything here works on numpy arrays in SI units (seconds internally).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np
import scipy.fft

from gridflex.grid import GridSpec, padded_shape, wavenumbers_squared
from gridflex.memory import check_memory
from gridflex.solvers.far_field import FarField, step_factors
from gridflex.solvers.fft_buffers import rfft_rows_into
from gridflex.solvers.row_blocks import block_rows, for_row_blocks
from gridflex.solvers.spectral import DEFAULT_PAD_FACTOR, decay_length, transfer_function
from gridflex.validation import check_choice, check_number

__all__ = [
    "INTERPOLATIONS",
    "MODELS",
    "DEFAULT_WIDTH_FACTOR",
    "SpectralRelaxation",
    "check_relaxation_settings",
    "padded_forward",
    "relaxation_rates",
    "relaxation_pad_distance",
    "window_inverse",
]

MODELS = ("half-space", "relaxing")
"""Accepted time-dependent mantle models."""

INTERPOLATIONS = ("linear", "previous")
"""How the load varies within a time step: linear between the loads at its two ends,
or held at the load given at its start."""

DEFAULT_WIDTH_FACTOR = 0.5
"""Half-space padding on each side, in grid widths (the larger of the two extents)."""

_CACHE_STEPS = 4

_PAD_ADVICE = "use a smaller pad_factor or pad width factor, fewer cells or coarser cells"


def relaxation_rates(
    shape: tuple[int, int],
    dy: float,
    dx: float,
    rigidity: float,
    stiffness: float,
    model: str,
    viscosity: float,
    relaxation_time: float,
) -> np.ndarray | float:
    """Relaxation rate 1/tau(k) (s⁻¹) of every mode of a real 2-D FFT of *shape*.

    Parameters
    ----------
    shape : tuple of int
        FFT grid ``(ny, nx)``.
    dy, dx : float
        Spacing (m).
    rigidity : float
        D (N m).
    stiffness : float
        Δρ g (Pa m⁻¹).
    model : {"half-space", "relaxing"}
        Mantle model.
    viscosity : float
        Half-space viscosity eta (Pa s); unused by ``"relaxing"``.
    relaxation_time : float
        Asthenosphere relaxation time tau (s); unused by ``"half-space"``.

    Returns
    -------
    numpy.ndarray of shape (ny, nx // 2 + 1), or float
        ``beta(k) / (2 eta k)`` for the half-space (``inf`` at k = 0), or the scalar
        ``1 / tau`` for the relaxing asthenosphere.
    """
    if model == "relaxing":
        return 1.0 / relaxation_time
    ky2, kx2 = wavenumbers_squared(shape, dy, dx)
    k2 = ky2 + kx2
    beta = rigidity * k2 * k2 + stiffness
    k = np.sqrt(k2, out=k2)
    with np.errstate(divide="ignore"):
        rates = beta / (2.0 * viscosity * k)
    return rates


def relaxation_pad_distance(
    spec: GridSpec,
    rigidity: float,
    stiffness: float,
    model: str,
    pad_factor: float = DEFAULT_PAD_FACTOR,
    width_factor: float = DEFAULT_WIDTH_FACTOR,
) -> float:
    """Zero padding (m) to add on each side of the grid.

    The relaxing model's equilibrium is the elastic one, whose response decays within
    a few flexural parameters: *pad_factor* alpha. The half-space transient reaches
    much further (a suddenly applied load first spreads over a distance that grows
    with 1 / k) and the mean of the periodic domain responds instantly, so it is padded
    by at least *width_factor* times the larger grid extent as well.
    """
    alpha = decay_length(rigidity, stiffness)
    pad = pad_factor * alpha
    if model == "half-space":
        extent = max(spec.ny * spec.dy, spec.nx * spec.dx)
        pad = max(pad, width_factor * extent)
    return pad


def check_relaxation_settings(
    model: str,
    interpolation: str,
    stiffness: float,
    viscosity: float,
    relaxation_time: float,
    pad_factor: float,
    width_factor: float,
) -> None:
    """Check the settings every time-dependent engine takes (SI units; see
    :meth:`SpectralRelaxation.build`).

    Raises
    ------
    InputError
        A model or interpolation not on the list, a stiffness, viscosity or relaxation time
        not > 0, or a negative padding factor.
    """
    check_choice("model", model, MODELS)
    check_choice("interpolation", interpolation, INTERPOLATIONS)
    for name, value, unit in (
        ("stiffness", stiffness, "Pa/m"),
        ("viscosity", viscosity, "Pa s"),
        ("relaxation_time", relaxation_time, "s"),
    ):
        check_number(name, value, unit=unit, minimum=0.0, strict=True)
    for name, value in (("pad_factor", pad_factor), ("width_factor", width_factor)):
        check_number(name, value, minimum=0.0)


@dataclass
class SpectralRelaxation:
    """State of a relaxing plate on a (padded) periodic FFT grid.

    Holds the deflection spectrum and the spectrum of the load now acting. Create it
    with :meth:`build`; advance it with :meth:`step`.

    Attributes
    ----------
    spec : GridSpec
        The unpadded (output) grid.
    shape : tuple of int
        FFT grid.
    model : str
        ``"half-space"`` or ``"relaxing"``.
    interpolation : str
        ``"linear"`` or ``"previous"``.
    """

    spec: GridSpec
    shape: tuple[int, int]
    model: str
    interpolation: str
    transfer: np.ndarray
    rates: np.ndarray | float
    state: np.ndarray
    load_spectrum: np.ndarray
    far: FarField | None = None
    _factors: dict[float, tuple] = field(default_factory=dict, repr=False)
    _scratch: np.ndarray | None = field(default=None, repr=False)
    _rate_factors: tuple | None = field(default=None, repr=False)
    _spare: np.ndarray | None = field(default=None, repr=False)
    """A spectrum array no longer in use, for the next forward transform to fill."""
    _made: tuple[np.ndarray, ...] = field(default=(), repr=False)
    """The last spectra :meth:`forward` made (only those may become :attr:`_spare`)."""
    _rows: np.ndarray | None = field(default=None, repr=False)
    """The zero-padded data rows of the forward transform (see :func:`padded_forward`)."""

    @classmethod
    def build(
        cls,
        spec: GridSpec,
        rigidity: float,
        stiffness: float,
        model: str,
        viscosity: float,
        relaxation_time: float,
        interpolation: str = "linear",
        periodic: bool = False,
        pad_factor: float = DEFAULT_PAD_FACTOR,
        width_factor: float = DEFAULT_WIDTH_FACTOR,
    ) -> SpectralRelaxation:
        """Choose the FFT grid, compute the per-mode kernels, start at rest with no load.

        Parameters
        ----------
        spec : GridSpec
            Output grid.
        rigidity, stiffness : float
            D (N m) and Δρ g (Pa m⁻¹, > 0).
        model : {"half-space", "relaxing"}
            Mantle model.
        viscosity : float
            eta (Pa s, > 0).
        relaxation_time : float
            tau (s, > 0).
        interpolation : {"linear", "previous"}
            Load variation within a step.
        periodic : bool
            No padding (the domain repeats).
        pad_factor, width_factor : float
            Padding, see :func:`relaxation_pad_distance`.

        Raises
        ------
        InputError
            Bad parameter, or a padded grid that does not fit in memory.
        """
        check_relaxation_settings(
            model, interpolation, stiffness, viscosity, relaxation_time, pad_factor, width_factor
        )
        check_number("rigidity", rigidity, unit="N m", minimum=0.0)
        if periodic:
            shape = spec.shape
        else:
            pad = relaxation_pad_distance(
                spec, rigidity, stiffness, model, pad_factor, width_factor
            )
            shape = padded_shape(spec, pad, advice=_PAD_ADVICE)
        n_half = shape[0] * (shape[1] // 2 + 1)
        # per half-spectrum mode, in float64 words: transfer and rates (2), cached step
        # factors (3 per step length, repeated for re/im on half the rows: 3 each), state
        # and load spectra (4), scratch (2), rate factors (2), transform temporaries (6)
        words = 2 + 3 * _CACHE_STEPS + 4 + 2 + 2 + 6
        check_memory(
            8.0 * n_half * words,
            f"time-dependent response on a padded grid of {shape[0]} x {shape[1]}",
            advice=_PAD_ADVICE,
        )
        transfer = transfer_function(shape, spec.dy, spec.dx, rigidity, stiffness)
        rates = relaxation_rates(
            shape, spec.dy, spec.dx, rigidity, stiffness, model, viscosity, relaxation_time
        )
        half = (shape[0], shape[1] // 2 + 1)
        far = None
        if model == "half-space" and not periodic:
            far = FarField.build(spec, shape, rigidity, stiffness, viscosity)
        return cls(
            spec,
            shape,
            model,
            interpolation,
            transfer,
            rates,
            np.zeros(half, dtype=np.complex128),
            np.zeros(half, dtype=np.complex128),
            far,
        )

    # -- transforms ---------------------------------------------------------------
    def forward(self, load: np.ndarray) -> np.ndarray:
        """Spectrum of *load* (Pa, on the unpadded grid) zero-padded to the FFT grid (a
        new array, or the spare one the engine no longer uses).

        The transform along x runs only over the rows that hold data (the padding
        rows are zero), which is what makes a widely padded grid affordable.
        """
        out, self._spare = self._spare, None
        if out is None:
            out = np.empty((self.shape[0], self.shape[1] // 2 + 1), dtype=np.complex128)
        if self._rows is None:
            self._rows = np.zeros((self.spec.ny, self.shape[1]))
        spectrum = padded_forward(load, self.shape, out, self._rows)
        self._made = (*self._made[-1:], spectrum)
        return spectrum

    def inverse(self, spectrum: np.ndarray, copy: bool = True) -> np.ndarray:
        """Field on the unpadded grid from a spectrum on the FFT grid (input kept).

        Only the rows and columns of the output window are transformed back along x.
        Without *copy* the field may be a view of a larger new array (see
        :func:`window_inverse`).
        """
        work = self._work(_floats(spectrum)).view(np.complex128)
        if not np.may_share_memory(work, spectrum):
            np.copyto(work, spectrum)
        return window_inverse(work, self.shape, self.spec.shape, overwrite=True, copy=copy)

    def _replace_load_spectrum(self, spectrum: np.ndarray) -> None:
        """Make *spectrum* (from :meth:`forward`) the load acting now; the one it replaces
        becomes the spare array when this engine made it."""
        old = self.load_spectrum
        self.load_spectrum = spectrum
        if any(old is made for made in self._made):
            self._spare = old

    # -- state --------------------------------------------------------------------
    def _spectrum(self, load: np.ndarray) -> tuple[np.ndarray, np.ndarray | None]:
        """The load's spectrum, without its net force, first and second moments when the far
        field is split off (returned as well then)."""
        values = np.asarray(load, dtype=np.float64)
        spectrum = self.forward(values)
        if self.far is None:
            return spectrum, None
        return spectrum, self.far.split(values, spectrum)

    def set_load(self, load: np.ndarray) -> None:
        """Make *load* (Pa) the load acting now, without moving the plate."""
        spectrum, moments = self._spectrum(load)
        self._replace_load_spectrum(spectrum)
        if self.far is not None and moments is not None:
            self.far.moments = moments

    def set_equilibrium(self) -> None:
        """Put the plate in elastic equilibrium with the load acting now."""
        self.state = self.load_spectrum * self.transfer
        if self.far is not None:
            self.far.set_equilibrium()

    def deflection(self) -> np.ndarray:
        """Current deflection w (m, positive down) on the unpadded grid."""
        if self.far is None:
            return self.inverse(self.state)
        # the window of the inverse added to the far field (a new array): no copy of it
        return self.far.field(base=self.inverse(self.state, copy=False))

    def equilibrium(self) -> np.ndarray:
        """Elastic equilibrium (m) under the load acting now."""
        if self.far is None:
            return self.inverse(self.load_spectrum * self.transfer)
        return self.far.equilibrium_field(
            base=self.inverse(self.load_spectrum * self.transfer, copy=False)
        )

    def rate(self) -> np.ndarray:
        """dw/dt (m s⁻¹, positive = moving down) now, under the load acting now.

        The k = 0 mode of the periodic half-space (tau = 0) follows the load
        instantly; it has no finite rate and is left out (with padding it is zero: the
        net force is carried by the far field, whose rate is included).
        """
        if self._rate_factors is None:
            rates = self.rates
            if isinstance(rates, np.ndarray):
                rates = np.where(np.isinf(rates), 0.0, rates)
            self._rate_factors = (_half_pairs(self.transfer), _half_pairs(rates))
        transfer, rates = self._rate_factors
        load, state = _floats(self.load_spectrum), _floats(self.state)
        work = self._work(state)

        def update(rows: slice, factor_rows: slice) -> None:
            out = work[rows]
            np.multiply(load[rows], _rows(transfer, factor_rows), out=out)
            out -= state[rows]
            out *= _rows(rates, factor_rows)

        _for_mirrored_rows(work.shape[0], work.shape[1], update)
        # work is the inverse's work space
        if self.far is None:
            return self.inverse(work.view(np.complex128))
        return self.far.rate_field(base=self.inverse(work.view(np.complex128), copy=False))

    def _work(self, like: np.ndarray) -> np.ndarray:
        """A work array shaped like the float view *like* of a spectrum (kept between
        calls: one per engine)."""
        if self._scratch is None or self._scratch.shape != like.shape:
            self._scratch = np.empty_like(like)
        return self._scratch

    def _step_factors(self, dt: float) -> tuple:
        factors = self._factors.get(dt)
        if factors is not None:
            return factors
        # dt / tau is inf at k = 0 for the half-space
        modes = step_factors(self.rates, self.transfer, dt, self.interpolation)
        # real factors repeated for the (re, im) pairs of the complex spectra: plain
        # float64 products without a cast of the factor to complex; rows 0 to ny / 2 only
        factors = tuple(_half_pairs(f) for f in modes)
        if self.far is not None:
            factors = (*factors, self.far.factors(dt, self.interpolation))
        if len(self._factors) >= _CACHE_STEPS:
            self._factors.pop(next(iter(self._factors)))
        self._factors[dt] = factors
        return factors

    def step(self, dt: float, load: np.ndarray) -> None:
        """Advance the state by *dt* seconds.

        Parameters
        ----------
        dt : float
            Step length (s, > 0).
        load : numpy.ndarray
            With ``"previous"``: the load (Pa) held during the step. With
            ``"linear"``: the load at the end of the step; it is reached linearly from
            the load acting at the start. Either way it is the load acting afterwards.
        """
        factors = self._step_factors(dt)
        new, moments = self._spectrum(load)
        if self.far is not None and moments is not None:
            self.far.step(factors[-1], moments, self.interpolation)
        state, before, after = _floats(self.state), _floats(self.load_spectrum), _floats(new)
        scratch = self._work(state)
        previous = self.interpolation == "previous"

        def update(rows: slice, factor_rows: slice) -> None:
            # in blocks of rows: the few passes stay in cache, the threads share them
            out, buffer = state[rows], scratch[rows]
            out *= _rows(factors[0], factor_rows)
            if previous:
                np.multiply(after[rows], _rows(factors[1], factor_rows), out=buffer)
                out += buffer
            else:
                np.multiply(before[rows], _rows(factors[1], factor_rows), out=buffer)
                out += buffer
                np.multiply(after[rows], _rows(factors[2], factor_rows), out=buffer)
                out += buffer

        _for_mirrored_rows(state.shape[0], state.shape[1], update)
        self._replace_load_spectrum(new)


def padded_forward(
    values: np.ndarray,
    shape: tuple[int, int],
    out: np.ndarray | None = None,
    rows: np.ndarray | None = None,
) -> np.ndarray:
    """Half spectrum (as ``scipy.fft.rfft2``) of *values* zero-padded to *shape*, the data
    at the first rows and columns; the transform along x runs only over the data rows.

    With *out* (complex128, ``(shape[0], shape[1] // 2 + 1)``, C order) the spectrum is
    built in it and returned as a view of it: a reused array spares the allocation and
    the first-touch page faults of a fresh one (a quarter of a transform's time on
    1024² grids, measured). With *rows* as well (float64, ``(values' rows, shape[1])``,
    C order, zero beyond the data's columns, which stay zero: only the data's columns
    are written) the padded rows are built there and transformed straight into *out*
    (:func:`~gridflex.solvers.fft_buffers.rfft_rows_into`): no zero fill of the padding
    and no copy of the transformed rows."""
    values = np.asarray(values, dtype=np.float64)
    if out is None:
        transformed = scipy.fft.rfft(values, n=shape[1], axis=1, workers=-1)
        return scipy.fft.fft(transformed, n=shape[0], axis=0, workers=-1, overwrite_x=True)
    ny, nx = values.shape
    if rows is None:
        # the zero-padded rows laid out in *out*'s own memory (as floats)
        rows = out.view(np.float64)[:ny, : shape[1]]
        rows[:, nx:] = 0.0
        rows[:, :nx] = values
        out[:ny] = scipy.fft.rfft(rows, axis=1, workers=-1)
    else:
        rows[:, :nx] = values
        rfft_rows_into(rows, out[:ny])
    out[ny:] = 0.0
    return scipy.fft.fft(out, axis=0, workers=-1, overwrite_x=True)


def window_inverse(
    spectrum: np.ndarray,
    shape: tuple[int, int],
    window: tuple[int, int],
    overwrite: bool = False,
    copy: bool = True,
) -> np.ndarray:
    """The first *window* rows and columns of the inverse of a half spectrum of *shape*;
    only the window's rows are transformed back along x. The input is kept unless
    *overwrite* (then it is used as work space). The result is a new array: its own
    (C-contiguous) unless *copy* is False, then it may be a view of the window of a
    larger new array (for a caller that writes the sum of it and another field into a
    new array anyway)."""
    ny, nx = window
    columns = scipy.fft.ifft(spectrum, axis=0, workers=-1, overwrite_x=overwrite)[:ny]
    full = scipy.fft.irfft(columns, n=shape[1], axis=1, workers=-1)
    if full.shape[1] == nx or not copy:
        return full[:, :nx]
    return np.ascontiguousarray(full[:, :nx])


def _rows(factor: np.ndarray | float, rows: slice) -> np.ndarray | float:
    """Rows *rows* of a per-mode factor; scalars pass through."""
    return factor[rows] if isinstance(factor, np.ndarray) else factor


def _for_mirrored_rows(ny: int, width: int, update: Callable[[slice, slice], None]) -> None:
    """Call ``update(rows, factor_rows)`` over a spectrum *ny* rows high (*width* floats
    wide) in cache-sized blocks shared among threads, where the per-mode factors are
    kept for rows 0 to ny // 2 only (see :func:`_half_pairs`): each block of those rows
    is followed by its mirror rows ny − j, which have the same factors, so a factor
    block is read from memory once for two blocks of the spectrum."""
    half = ny // 2 + 1
    distinct = (ny + 1) // 2  # rows 1 .. distinct - 1 have a mirror other than themselves

    def run(j0: int, j1: int, _thread: int) -> None:
        update(slice(j0, j1), slice(j0, j1))
        a, b = max(j0, 1), min(j1, distinct)
        if a < b:
            update(slice(ny - b + 1, ny - a + 1), slice(b - 1, a - 1, -1))

    for_row_blocks(half, block_rows(2 * width, half), run)


def _half_pairs(factor: np.ndarray | float) -> np.ndarray | float:
    """Rows 0 to ny // 2 of a per-mode factor of a half spectrum, each value repeated for
    the (re, im) pair; scalars pass through. A factor that depends on k_y² (every factor
    here) is the same in row j and in row ny − j (``numpy.fft.fftfreq`` gives them
    wavenumbers of opposite sign, exactly)."""
    if isinstance(factor, np.ndarray):
        return _pairs(factor[: factor.shape[0] // 2 + 1])
    return float(factor)


def _floats(spectrum: np.ndarray) -> np.ndarray:
    """A complex128 array viewed as float64 (re, im) pairs along the last axis."""
    return spectrum.view(np.float64)


def _pairs(factor: np.ndarray | float) -> np.ndarray | float:
    """A real factor repeated for each (re, im) pair; scalars pass through."""
    if isinstance(factor, np.ndarray):
        return np.repeat(factor, 2, axis=-1)
    return float(factor)
