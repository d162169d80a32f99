"""PNG figures, one module per pipeline stage; :func:`~ptares.figures.common.save_figure` writes one atomically."""
