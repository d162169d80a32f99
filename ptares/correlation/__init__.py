"""Cross-correlation stage: Fourier-domain products, pair correlations, optimal statistics, nulls and scatter."""
