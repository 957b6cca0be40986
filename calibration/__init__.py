"""Calibration numerics: fitting a model's parameters to measurements (pure numerics).

Imports engine, numpy and scipy only; never Flask, Celery, Redis or marshmallow.
"""
