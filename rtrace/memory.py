"""Memory known before work: estimates of the large allocations, the machine's free memory, the check.

Every step that allocates arrays whose size follows from the user's input
(the tracer's ray lattice and images, beam kernels and their zero-padded
FFTs, the observed images, the synthesis buffers) estimates its bytes from
the input first and calls :func:`check_memory`, which refuses with an
:class:`~rtrace.errors.InputError` naming the field, the amount, the
memory at hand and how to reduce it, before anything large is allocated.

The limit is the smaller of the memory the machine has available
(:func:`available_memory`: ``MemAvailable`` of ``/proc/meminfo``, capped by
a cgroup limit where one is set, else ``os.sysconf``) and ``max_memory``
when the caller gives one. When neither can be known (no ``/proc``, no
``sysconf``) and no ``max_memory`` is given, nothing is refused: the
estimate is then only as good as the operating system's own refusal.

The estimates count float64 arrays (8 bytes a value, complex 16) and the
main temporaries numpy and scipy make; they are meant to be right within a
factor of about two, which is what matters to tell "fits" from "takes the
whole machine". This module only does arithmetic: it imports nothing of
rtrace but its errors, so every layer can use it.
"""

import os

from .errors import InputError

__all__ = [
    "HEADROOM",
    "available_memory",
    "format_bytes",
    "check_memory",
    "fits_in_memory",
    "array_bytes",
    "fft_kernel_bytes",
    "split_cell_bytes",
    "trace_image_bytes",
    "trace_ray_bytes",
    "observe_bytes",
    "synthesis_bytes",
]

_FLOAT = 8
_COMPLEX = 16

#: Share of the available memory one step may plan to use: the rest is left to the interpreter, the
#: libraries, the step's smaller temporaries and what follows it (writing, the next view).
HEADROOM = 0.8


def _meminfo_available(path="/proc/meminfo"):
    try:
        with open(path, "rb") as fh:
            for line in fh:
                if line.startswith(b"MemAvailable:"):
                    parts = line.split()
                    return int(parts[1]) * 1024  # the value is in kB (KiB)
    except (OSError, ValueError, IndexError):
        return None
    return None


def _cgroup_available():
    """Bytes left under a cgroup v2 memory limit, or None when there is none."""
    try:
        with open("/sys/fs/cgroup/memory.max") as fh:
            limit = fh.read().strip()
        if limit == "max":
            return None
        with open("/sys/fs/cgroup/memory.current") as fh:
            current = int(fh.read().strip())
        return max(int(limit) - current, 0)
    except (OSError, ValueError):
        return None


def _sysconf_available():
    try:
        pages = os.sysconf("SC_AVPHYS_PAGES")
        size = os.sysconf("SC_PAGE_SIZE")
    except (AttributeError, ValueError, OSError):
        return None
    if pages <= 0 or size <= 0:
        return None
    return int(pages) * int(size)


def available_memory():
    """Bytes of memory this process can still allocate without swapping, or None when unknown.

    ``MemAvailable`` of ``/proc/meminfo`` (Linux: free memory plus the page
    cache the kernel can drop), else ``os.sysconf("SC_AVPHYS_PAGES")`` times
    the page size (free pages only); capped by a cgroup v2 limit when one is
    set (containers).
    """
    found = _meminfo_available()
    if found is None:
        found = _sysconf_available()
    cgroup = _cgroup_available()
    if cgroup is not None:
        found = cgroup if found is None else min(found, cgroup)
    return found


def format_bytes(n):
    """``n`` bytes as a short text in decimal units (``"3.2 GB"``, ``"41 MB"``)."""
    n = float(n)
    for unit, scale in (("TB", 1e12), ("GB", 1e9), ("MB", 1e6), ("kB", 1e3)):
        if n >= scale:
            return f"{n / scale:.3g} {unit}"
    return f"{int(n)} bytes"


def array_bytes(*shape, itemsize=_FLOAT):
    """Bytes of an array of this shape (Python ints: no overflow however large)."""
    n = 1
    for s in shape:
        n *= int(s)
    return n * int(itemsize)


def check_memory(need, *, field, what, hint, budget=None):
    """Refuse (InputError) when ``need`` bytes exceed the available memory or ``budget``.

    Parameters
    ----------
    need : int
        Estimated bytes of the step.
    field : str
        The input the user can change (``"npix"``, ``"beam"``, ``"[view] npix"``); starts the message.
    what : str
        What is allocated (``"the images of 12 frequencies at 20000 x 20000 pixels"``).
    hint : str
        How to reduce it (``"use a smaller npix or fewer frequencies"``).
    budget : int, optional
        ``max_memory`` in bytes, when the caller was given one.

    Returns
    -------
    int
        ``need``, so that callers can log it.

    Raises
    ------
    InputError
        If ``need`` exceeds ``budget`` or `HEADROOM` times the machine's available memory.
    """
    need = int(need)
    if budget is not None and need > budget:
        raise InputError(
            f"{field}: {what} would need about {format_bytes(need)}, more than max_memory = "
            f"{format_bytes(budget)}; {hint}"
        )
    avail = available_memory()
    if avail is not None and need > HEADROOM * avail:
        raise InputError(
            f"{field}: {what} would need about {format_bytes(need)}, more than "
            f"{HEADROOM:.0%} of the {format_bytes(avail)} of memory available on this machine; "
            f"{hint}"
        )
    return need


def fits_in_memory(need):
    """Whether ``need`` bytes fit within `HEADROOM` of the available memory (True when it is unknown)."""
    avail = available_memory()
    return avail is None or int(need) <= HEADROOM * avail


def split_cell_bytes(ncells, nfreq):
    """Bytes of the per-cell state of an oblique split (``rtrace.transfer.oblique_split``).

    Float64 ``alpha_nu``, mean sensitivity and source function per frequency, and the emission-measure weight.
    """
    return (3 * int(nfreq) + 1) * _FLOAT * int(ncells)


def trace_image_bytes(nfreq, npix):
    """Bytes of a trace's float64 image planes.

    Intensity, optical depth and a remap term per frequency, and the emission
    measure (``rtrace.transfer.tracer``).
    """
    return (3 * int(nfreq) + 1) * _FLOAT * int(npix)


def trace_ray_bytes(nfreq, nrays):
    """Bytes a trace holds per ray.

    Its float64 segment (I and tau per frequency, EM) and the remap's
    temporaries (values, background terms, tube positions).
    """
    return ((2 * int(nfreq) + 1) + (3 * int(nfreq) + 1 + 8)) * _FLOAT * int(nrays)


def fft_kernel_bytes(half, fft_shape):
    """``(held, transient)`` bytes of one beam kernel of half width ``half`` on a padded ``fft_shape`` grid.

    Held while the kernel lives: the ``(2 half + 1)^2`` kernel and the real FFT
    of the padded kernel. Transient, at the worst moment: building the kernel
    (about six kernel-sized temporaries, then the padded copy) or convolving one
    plane (its transform, the product and the padded inverse).
    """
    side = 2 * int(half) + 1
    f0, f1 = int(fft_shape[0]), int(fft_shape[1])
    real = array_bytes(f0, f1)
    spectrum = array_bytes(f0, f1 // 2 + 1, itemsize=_COMPLEX)
    kernel = array_bytes(side, side)
    held = kernel + spectrum
    transient = max(6 * kernel + real, 2 * spectrum + real)
    return held, transient


def observe_bytes(nfreq, image_shape, kernels, noise=False):
    """Bytes of an observation: images and the beam kernels.

    Parameters
    ----------
    nfreq : int
    image_shape : (int, int)
    kernels : list of (half, fft_shape)
        One entry per distinct beam.
    noise : bool
        Whether noise is added (one more image cube and a padded white field).
    """
    cube = array_bytes(nfreq, *image_shape)
    # intensity, Jy per pixel, the model, (the data with noise)
    total = (4 if noise else 3) * cube
    held = transient = 0
    for half, fft_shape in kernels:
        h, t = fft_kernel_bytes(half, fft_shape)
        held += h
        extra = array_bytes(*fft_shape) if noise else 0
        transient = max(transient, t + extra)
    return total + held + transient


def synthesis_bytes(nfreq, image_size, nvis, model_shape, chunk_bytes=0):
    """``(images, samples)``: bytes of a synthesis's image buffers and of its (u, v) samples.

    Images: restored, dirty, residual, components and (with a dish) primary-beam
    images of ``image_size^2`` per frequency, the dirty beam on
    ``(2 image_size)^2``, the model's Jy per pixel cube (twice: the intensity and
    its conversion) and ``chunk_bytes`` of working space (the Fourier sums'
    chunks). Samples: complex visibilities and weights of ``2 nvis`` samples per
    frequency, and about sixteen float64 values per sample for the tracks and one
    frequency's coordinates, weights and their Hermitian copies.
    """
    plane = array_bytes(nfreq, image_size, image_size)
    images = 5 * plane + 4 * plane + 2 * array_bytes(nfreq, *model_shape) + int(chunk_bytes)
    samples = array_bytes(nfreq, 2 * nvis, itemsize=_COMPLEX) + array_bytes(nfreq, 2 * nvis) + array_bytes(nvis, 16)
    return images, samples
