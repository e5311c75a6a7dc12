"""Tracking stage: clip → trajectory (pixels → millimetres, container time → seconds).

See DEVELOPERS.md for the trajectory column contract.
"""

import cv2 as _cv2

# OpenCV runs on the calling thread only. Its thread pool gains fallcam nothing (the windows are
# small; tracking a 1080p clip alone took the same wall time) but its workers spin between calls:
# ~0.6 s of CPU per 600 such frames, taken from the decoder threads that keep every core busy.
# Set here, at import, before any pool exists: reconfiguring a pool that a forked process
# inherited hangs. (A host program that wants OpenCV's threads back can call setNumThreads.)
_cv2.setNumThreads(1)
