"""Intel Open Image Denoise (CPU) on the linear HDR radiance, through ctypes.

The PyPI wheel ``oidn`` (0.2.1) bundles ``libOpenImageDenoise.so.1.4.3`` and ``libtbb.so.12.5``.
Its own ``import oidn`` fails on Linux: the denoiser library asks the dynamic loader for
``libtbb.so.12``, which is not on the search path. We never import the package: we locate its
folder, load the bundled TBB first with ``RTLD_GLOBAL`` (so the soname is already satisfied) and
then the denoiser, and call the C API ourselves — which also gives us ``oidnSetFilter1b`` for the
``hdr`` flag that the binding does not expose. Nothing is written into site-packages and nothing is
downloaded.

:func:`denoise` runs the ``RT`` filter on linear radiance (``hdr`` on) with the albedo and
shading-normal auxiliary images, as the library's documentation recommends for path-traced
frames. When the library cannot be loaded, :func:`denoiser_status` says why and the frame
pipeline renders undenoised and records that in the labels.

References
----------
Intel Open Image Denoise 1.4 API documentation, "RT" filter: inputs ``color``, ``albedo``,
``normal``, ``output``; parameters ``hdr``, ``srgb``, ``cleanAux``; device parameter
``numThreads``.
"""

from __future__ import annotations

import ctypes
import importlib.util
import os
import threading
from dataclasses import dataclass
from pathlib import Path
from typing import overload

import numpy as np

_OIDN_SONAME = "libOpenImageDenoise.so.1.4.3"
_TBB_SONAME = "libtbb.so.12.5"
_DEVICE_TYPE_CPU = 1
_FORMAT_FLOAT3 = 3
_ERROR_NONE = 0


class DenoiserUnavailable(RuntimeError):
    """The denoiser library could not be loaded or failed; the message says why."""


@dataclass
class _Library:
    lib: ctypes.CDLL
    device: int
    threads: int


_LOCK = threading.Lock()
_STATE: dict[str, object] = {}


def _library_folder() -> Path:
    spec = importlib.util.find_spec("oidn")
    if spec is None or not spec.submodule_search_locations:
        raise DenoiserUnavailable("the Python package 'oidn' (0.2.1) is not installed")
    folder = Path(next(iter(spec.submodule_search_locations))) / "lib.linux.x64"
    if not (folder / _OIDN_SONAME).is_file():
        raise DenoiserUnavailable(f"{folder / _OIDN_SONAME} is missing (only Linux x86-64 is bundled)")
    return folder


def _declare(lib: ctypes.CDLL) -> None:
    c_void_p, c_char_p, c_size_t = ctypes.c_void_p, ctypes.c_char_p, ctypes.c_size_t
    signatures = {
        "oidnNewDevice": ([ctypes.c_int], c_void_p),
        "oidnSetDevice1i": ([c_void_p, c_char_p, ctypes.c_int], None),
        "oidnCommitDevice": ([c_void_p], None),
        "oidnGetDeviceError": ([c_void_p, ctypes.POINTER(c_char_p)], ctypes.c_int),
        "oidnReleaseDevice": ([c_void_p], None),
        "oidnNewFilter": ([c_void_p, c_char_p], c_void_p),
        "oidnSetSharedFilterImage": (
            [c_void_p, c_char_p, c_void_p, ctypes.c_int, c_size_t, c_size_t, c_size_t, c_size_t, c_size_t],
            None,
        ),
        "oidnSetFilter1b": ([c_void_p, c_char_p, ctypes.c_bool], None),
        "oidnCommitFilter": ([c_void_p], None),
        "oidnExecuteFilter": ([c_void_p], None),
        "oidnReleaseFilter": ([c_void_p], None),
    }
    for name, (argtypes, restype) in signatures.items():
        function = getattr(lib, name)
        function.argtypes = argtypes
        function.restype = restype


def _check(lib: ctypes.CDLL, device: int, what: str) -> None:
    message = ctypes.c_char_p()
    code = lib.oidnGetDeviceError(device, ctypes.byref(message))
    if code != _ERROR_NONE:
        text = message.value.decode("utf-8", "replace") if message.value else "no message"
        raise DenoiserUnavailable(f"Open Image Denoise: {what} failed (error {code}: {text})")


def _load(threads: int) -> _Library:
    folder = _library_folder()
    try:
        ctypes.CDLL(str(folder / _TBB_SONAME), mode=os.RTLD_GLOBAL)
        lib = ctypes.CDLL(str(folder / _OIDN_SONAME))
    except OSError as exc:
        raise DenoiserUnavailable(f"could not load the bundled denoiser library: {exc}") from exc
    _declare(lib)
    device = lib.oidnNewDevice(_DEVICE_TYPE_CPU)
    if not device:
        raise DenoiserUnavailable("Open Image Denoise: no CPU device (the CPU may lack SSE4.1)")
    if threads > 0:
        lib.oidnSetDevice1i(device, b"numThreads", int(threads))
    lib.oidnCommitDevice(device)
    _check(lib, device, "device creation")
    return _Library(lib=lib, device=device, threads=threads)


def _library(threads: int | None = None) -> _Library:
    wanted = int(threads or 0)
    with _LOCK:
        state = _STATE.get("library")
        if isinstance(state, _Library) and state.threads == wanted:
            return state
        if isinstance(state, DenoiserUnavailable):
            raise state
        if isinstance(state, _Library):
            state.lib.oidnReleaseDevice(state.device)
        try:
            library = _load(wanted)
        except DenoiserUnavailable as exc:
            _STATE["library"] = exc
            raise
        _STATE["library"] = library
        return library


def denoiser_status() -> str | None:
    """``None`` when the denoiser loads here, else the reason it does not."""
    try:
        _library()
    except DenoiserUnavailable as exc:
        return str(exc)
    return None


@overload
def _image(array: np.ndarray, shape: tuple[int, ...], name: str) -> np.ndarray: ...


@overload
def _image(array: np.ndarray | None, shape: tuple[int, ...], name: str) -> np.ndarray | None: ...


def _image(array: np.ndarray | None, shape: tuple[int, ...], name: str) -> np.ndarray | None:
    if array is None:
        return None
    image = np.ascontiguousarray(np.asarray(array, dtype=np.float32)[..., :3])
    if image.shape != shape:
        raise ValueError(f"denoise: {name} image has shape {image.shape}, expected {shape}")
    return image


def denoise(
    color_rgb: np.ndarray,
    *,
    albedo_rgb: np.ndarray | None = None,
    normal_xyz: np.ndarray | None = None,
    hdr: bool = True,
    threads: int | None = None,
) -> np.ndarray:
    """Denoise a linear (H, W, 3) image; returns a new float32 array of the same shape.

    Parameters
    ----------
    color_rgb : numpy.ndarray
        Noisy linear radiance (any scale when ``hdr``; the library normalizes it).
    albedo_rgb, normal_xyz : numpy.ndarray, optional
        Auxiliary images of the same shape: first-hit albedo (0..1) and shading normal (−1..1, any
        space as long as it is consistent). The normal is only used together with the albedo.
    hdr : bool
        The colour is high dynamic range (linear, unbounded).
    threads : int, optional
        Worker threads of the denoiser (default: the library's choice, all cores).

    Raises
    ------
    DenoiserUnavailable
        The library could not be loaded or reported an error.
    """
    color = _image(color_rgb, np.shape(color_rgb)[:2] + (3,), "color")
    shape = color.shape
    albedo = _image(albedo_rgb, shape, "albedo")
    normal = _image(normal_xyz, shape, "normal") if albedo is not None else None
    color = np.nan_to_num(color, nan=0.0, posinf=0.0, neginf=0.0)
    output = np.empty_like(color)
    library = _library(threads)
    lib, device = library.lib, library.device
    height, width = shape[:2]
    with _LOCK:  # one filter at a time per process: the device is shared
        handle = lib.oidnNewFilter(device, b"RT")
        try:
            for name, image in (("color", color), ("albedo", albedo), ("normal", normal), ("output", output)):
                if image is not None:
                    lib.oidnSetSharedFilterImage(
                        handle, name.encode(), image.ctypes.data, _FORMAT_FLOAT3, width, height, 0, 0, 0
                    )
            lib.oidnSetFilter1b(handle, b"hdr", bool(hdr))
            lib.oidnCommitFilter(handle)
            _check(lib, device, "filter set-up")
            lib.oidnExecuteFilter(handle)
            _check(lib, device, "filtering")
        finally:
            lib.oidnReleaseFilter(handle)
    return output
