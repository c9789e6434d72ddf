"""A vocoder package written outside vocobench, as a user would: it imports numpy and librosa only.

``models.ShapedNoiseVocoder`` is an end-to-end vocoder with its own sampling loop;
``models.FrameGainDenoiser`` is a noise predictor for vocobench's built-in samplers. Both run at
24 kHz with their own front-end. ``faulty`` holds deliberately broken vocoders for the contract check.
"""
from .models import FRONTEND, FrameGainDenoiser, ShapedNoiseVocoder

__all__ = ["FRONTEND", "FrameGainDenoiser", "ShapedNoiseVocoder"]
