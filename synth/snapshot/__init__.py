"""Snapshots: the Snapshot product, views and rotations, file readers, the invented demo cloud.

``read_yt`` lives in :mod:`synth.snapshot.yt_reader` and needs the optional yt package.
"""

from .core import Snapshot
from .demo import demo_cloud, demo_source
from .readers import read_snapshot, write_npz
from .views import view

__all__ = ["Snapshot", "view", "read_snapshot", "write_npz", "demo_cloud", "demo_source"]
