"""webcam."""
