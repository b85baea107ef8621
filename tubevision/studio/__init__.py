"""Synthetic photo studio: spectral renders of rack photos with ground truth.

Used by ``tubevision demo``, the tests and the benchmarks of every stage.
Materials are rendered spectrally once (81 bands, 380-780 nm) under a CIE or
Planckian illuminant through a camera's spectral sensitivities; the photo is
then composed in camera raw values and developed like a phone would
(exposure, white balance, colour matrix, tone, saturation, noise, blur,
vignetting, perspective, JPEG, EXIF orientation).

Modules: ``spectra`` (tables, illuminants, sensors, object colour),
``materials`` (solutions, suspensions, solids: Beer-Lambert, Kubelka-Munk),
``camera`` (the phone pipeline), ``scene`` (geometry, drawing, truth),
``card_art`` (the reference card, printed spectrally), ``generate``
(random scenes, condition grids, the demo scene, saving), ``samples``
(regenerates ``sample_images/``).
"""

from .camera import CameraSpec
from .generate import demo_scene, random_scene, save_rendered, suite
from .scene import RenderedPhoto, SceneSpec, TubeSpec, render_scene

__all__ = [
    "CameraSpec",
    "SceneSpec",
    "TubeSpec",
    "RenderedPhoto",
    "render_scene",
    "save_rendered",
    "random_scene",
    "suite",
    "demo_scene",
]
