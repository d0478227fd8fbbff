"""Unsupervised segmentation of feature series into behaviour states."""
