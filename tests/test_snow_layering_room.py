"""A full column with no similar neighbours still makes room without losing a crust.

Thin similar neighbours merge, but crusts, surface hoar, depth hoar
and clearly different layers never merge away. Checked here on a column of alternating
glaze (IF) and thin new-snow (PP) layers, the case that random freezing rain produces.
"""

import numpy as np

from regionmap.snow.codes import CRUST_INDEX, GRAIN_INDEX
from regionmap.snow.layering import (
    F_ICE,
    F_LIQ,
    F_ROWS,
    F_TEMP,
    F_THICK,
    I_CODE,
    I_CRUST,
    I_EVENT,
    I_ROWS,
    merge_to_make_room,
)


def column(n=50):
    fw = np.zeros((F_ROWS, n))
    iw = np.zeros((I_ROWS, n), dtype=np.int64)
    glaze = np.arange(n) % 2 == 0
    fw[F_THICK] = np.where(glaze, 0.002, 0.01)
    fw[F_ICE] = np.where(glaze, 0.002 * 917.0, 0.01 * 80.0) + np.arange(n) * 1e-3  # distinct masses
    fw[F_TEMP] = 265.0
    iw[I_CODE] = np.where(glaze, GRAIN_INDEX["IF"], GRAIN_INDEX["PP"])
    iw[I_CRUST] = np.where(glaze, CRUST_INDEX["glaze"], 0)
    iw[I_EVENT] = np.arange(n)
    return fw, iw


def test_thin_snow_between_glazes_joins_a_glaze_and_no_glaze_is_lost():
    fw, iw = column()
    mass = fw[F_ICE].sum() + fw[F_LIQ].sum()
    n_glaze = int((iw[I_CRUST] == CRUST_INDEX["glaze"]).sum())
    n, gentle = merge_to_make_room(fw, iw, 50)
    assert n == 49 and gentle
    assert fw[F_ICE, :n].sum() + fw[F_LIQ, :n].sum() == mass  # mass adds exactly
    assert int((iw[I_CRUST, :n] == CRUST_INDEX["glaze"]).sum()) == n_glaze
    assert np.all(fw[:, n:] == 0) and np.all(iw[:, n:] == 0)
    # the lightest snow layer below the top four went (layer 1, the thinnest PP)
    assert iw[I_EVENT, 1] != 1


def test_all_protected_merges_alike_neighbours_first():
    fw, iw = column()
    iw[I_CODE] = GRAIN_INDEX["IF"]
    iw[I_CRUST] = CRUST_INDEX["glaze"]
    iw[I_CODE, ::3] = GRAIN_INDEX["MFcr"]
    iw[I_CRUST, ::3] = CRUST_INDEX["rain"]
    n, gentle = merge_to_make_room(fw, iw, 50)
    assert n == 49 and gentle
