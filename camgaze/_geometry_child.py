"""The geometry child process: ``python -m camgaze._geometry_child FOV_DEG REFINE`` (see camgaze.frame_geometry)."""
import sys

from camgaze.frame_geometry import child_main

if __name__ == "__main__":
    sys.exit(child_main())
