"""Orientation table CSV (docs/orientation-table.md)."""

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.errors import TracefitInputError
from tracefit.maps import read_orientation_table, write_orientation_table


def test_euler_and_quaternion_rows_give_the_same_matrix(tmp_path):
    bunge = (12.5, 34.0, 71.2)
    g = Rotation.from_euler("ZXZ", bunge, degrees=True).as_matrix().T  # scipy: crystal -> sample is g^T
    orix_q = pytest.importorskip("orix.quaternion")
    q = orix_q.Orientation.from_matrix(g).data[0]  # orix (test reference): quaternion of g, scalar first
    a = tmp_path / "e.csv"
    a.write_text("# comment\ngrain,phi1,Phi,phi2,sigma_deg,note\n7,%s,%s,%s,2.0,x\n" % bunge)
    b = tmp_path / "q.csv"
    b.write_text("grain,q0,q1,q2,q3\n7,%.15f,%.15f,%.15f,%.15f\n" % tuple(q))
    ta, tb = read_orientation_table(a), read_orientation_table(b)
    assert np.allclose(ta[7].g, g, atol=1e-9) and np.allclose(tb[7].g, g, atol=1e-9)
    assert ta[7].sigma_deg == 2.0 and ta[7].extra == {"note": "x"}


def test_round_trip(tmp_path):
    p = tmp_path / "t.csv"
    write_orientation_table(p, {1: (10.0, 20.0, 30.0), 2: (200.0, 80.0, 5.0)})
    t = read_orientation_table(p)
    g = Rotation.from_euler("ZXZ", (200.0, 80.0, 5.0), degrees=True).as_matrix().T
    assert np.allclose(t[2].g, g, atol=1e-6)


@pytest.mark.parametrize(
    "text",
    [
        "phi1,Phi,phi2\n1,2,3\n",  # no grain column
        "grain,a,b\n1,2,3\n",  # no orientation columns
        "grain,phi1,Phi,phi2\n1,2,x,3\n",  # not a number
        "grain,phi1,Phi,phi2\n1,2,3,4\n1,5,6,7\n",  # duplicate id
        "grain,phi1,Phi,phi2\n1.5,2,3,4\n",  # non-integer id
        "grain,q0,q1,q2,q3\n1,1,1,0,0\n",  # not a unit quaternion
        "grain,phi1,Phi,phi2\n",  # header only
    ],
)
def test_bad_tables(tmp_path, text):
    p = tmp_path / "bad.csv"
    p.write_text(text)
    with pytest.raises(TracefitInputError):
        read_orientation_table(p)
