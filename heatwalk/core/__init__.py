"""The core: the shared fit loop, training objectives, denoiser networks and the fitted Model."""
