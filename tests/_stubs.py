"""Small hand-built inputs shared by several test files (imported as ``from _stubs import ...``)."""

from types import SimpleNamespace

import networkx as nx
import numpy as np
import pandas as pd

from slipnet.crystal import quat_from_euler
from slipnet.maps import OrientationMap, Phase


def bicrystal_graph_stub():
    """A 4 × 6 map split at x = 2.5 µm into identity and (30°, 40°, 10°) grains, with the few graph
    attributes the slip and transmission steps read (a stand-in for a full GrainGraph)."""
    euler = np.zeros((4, 6, 3))
    euler[:, 3:] = [30.0, 40.0, 10.0]
    omap = OrientationMap.from_euler(euler, step=1.0, phases=(Phase("ferrite", "bcc", 0.2866),))
    labels = np.zeros((4, 6), np.int64)
    labels[:, 3:] = 1
    g = nx.Graph()
    for k, x in ((0, 1.0), (1, 4.0)):
        g.add_node(k, phase=0, centroid_x_um=x, centroid_y_um=1.5, ecd_um=3.0)
    g.add_edge(0, 1, boundary_id=0, trace_angle_deg=90.0, length_um=4.0)
    mean = np.stack([quat_from_euler([0, 0, 0]), quat_from_euler([30.0, 40.0, 10.0])])
    bnd = pd.DataFrame({"boundary_id": [0], "grain_a": [0], "grain_b": [1], "trace_angle_deg": [90.0]})
    grains = pd.DataFrame({"grain": [0, 1], "phase": [0, 0], "centroid_x_um": [1.0, 4.0], "centroid_y_um": [1.5, 1.5],
                           "ecd_um": [3.0, 3.0]})
    return SimpleNamespace(omap=omap, labels=labels, graph=g, mean_quats=mean, boundaries=bnd, grains=grains,
                           boundary_polylines={0: [np.array([[2.5, -0.5], [2.5, 3.5]])]})
