"""Deployment samples; the example site ships with the package for the demo."""
