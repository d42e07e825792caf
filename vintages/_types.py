"""Option strings accepted across :mod:`vintages`, as ``Literal`` aliases."""

from __future__ import annotations

from typing import Literal

Freq = Literal["Q", "M"]
Layout = Literal["long", "triangle", "sdmx-csv"]
FREQS: tuple[str, ...] = ("M", "Q")
LAYOUTS: tuple[str, ...] = ("long", "sdmx-csv", "triangle")
