"""Readers and writers: height maps, SEM images, calibration and safe writes.

The format modules import their heavy dependencies (tifffile, numpy-stl,
OpenCV) only when a file of that kind is read or written.
"""

from fracto.io.calibration import PixelSize
from fracto.io.heightmap import HeightMap, read_height_map, write_height_map
from fracto.io.safe import atomic_write, write_json_atomic
from fracto.io.sem import SemImage, read_sem_image

__all__ = [
    "HeightMap",
    "PixelSize",
    "SemImage",
    "atomic_write",
    "read_height_map",
    "read_sem_image",
    "write_height_map",
    "write_json_atomic",
]
