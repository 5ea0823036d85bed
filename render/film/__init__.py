"""film: frame sequences (keyframes, camera paths, one frame, the resumable driver, products, flash check)."""
