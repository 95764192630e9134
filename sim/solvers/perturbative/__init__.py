"""`method = "perturbative"`: golden-rule rate equations per packet momentum."""
