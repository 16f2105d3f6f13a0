"""A shared fit over a mixed family takes one term-value source that holds every element of every case
(the first case's table may lack a later case's element). Sources: the tables shipped in orbtool/data
(W. A. Harrison, *Electronic Structure and the Properties of Solids* (1980), Solid State Table; and the
LDA scalar-relativistic atomic eigenvalues computed by scripts/make_term_values.py)."""

import pytest
from ase.build import bulk

from orbtool.analysis import locate_vacancy
from orbtool.errors import ModelError
from orbtool.tb import ClusterModel, Target, available_elements, fit


def _site(formula, structure, a):
    host = bulk(formula, structure, a=a).repeat(2)
    defect = host.copy()
    del defect[1]
    return locate_vacancy(host, defect)


def test_shared_fit_over_zns_and_nacl_uses_one_table_with_every_element():
    assert "Na" not in available_elements("harrison1980") and "Zn" in available_elements("harrison1980")
    zns, nacl = _site("ZnS", "zincblende", 5.41), _site("NaCl", "rocksalt", 5.64)
    model = ClusterModel.around(zns, "hybrid")
    assert model.term_source == "harrison1980"         # the first case alone
    r = fit(model, [Target("zns", above_vbm=0.5, site=zns, gap=2.0), Target("nacl", above_vbm=4.0, site=nacl,
                                                                              gap=5.1)])
    assert {m.term_source for m in r.problem.models.values()} == {"lda-sr"}
    assert {"shift_Zn", "shift_Na"} <= set(r.names)


def test_an_explicit_table_is_kept_and_refused_clearly():
    zns, nacl = _site("ZnS", "zincblende", 5.41), _site("NaCl", "rocksalt", 5.64)
    model = ClusterModel.around(zns, "hybrid", term_values="harrison1980")
    with pytest.raises(ModelError, match="Na"):
        fit(model, [Target("zns", above_vbm=0.5, site=zns), Target("nacl", above_vbm=4.0, site=nacl)])
