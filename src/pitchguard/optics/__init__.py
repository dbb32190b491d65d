"""Optics: diffraction orders, aerial images, the resist stand-in, imaging of cuts through focus."""
