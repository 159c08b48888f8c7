"""Explanations of one classifier decision (Grad-CAM, occlusion, gradient saliency) and their sanity checks."""

from .checks import CHECK_DEFAULTS, Check
from .gradcam import gradcam, gradient
from .occlusion import OcclusionResult, occlusion
from .run import DEFAULT_SETTINGS, METHODS, Explanation, run
from .similarity import spearman, ssim

__all__ = [
    "CHECK_DEFAULTS",
    "DEFAULT_SETTINGS",
    "METHODS",
    "Check",
    "Explanation",
    "OcclusionResult",
    "gradcam",
    "gradient",
    "occlusion",
    "run",
    "spearman",
    "ssim",
]
