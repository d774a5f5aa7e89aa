"""ossicle's DSP library: SOFA HRIR sets, layouts, streaming binaural convolution."""

from __future__ import annotations

__version__ = "0.1.0"

from .errors import AudioError, HrirError, LayoutError, RendererError, SofaError

__all__ = [
    "__version__","AudioError", "HrirError", "LayoutError", "RendererError", "SofaError"]
