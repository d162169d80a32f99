"""Reports: one self-contained HTML page for any output folder (``ptares report``)."""
