"""Parameter names that differ only by Unicode compatibility characters (the ligature "ﬁ",
full-width letters) get a message that says so.

Outside reference: the Python language reference, "Identifiers and keywords": identifiers are
converted to the normal form NFKC while parsing, so ``def model(t, ﬁt)`` takes an argument
named "fit" (checked here with ``unicodedata.normalize``).
"""
from __future__ import annotations

import unicodedata

import pytest

from audit import InputError
from audit.inputs.scenario import load_scenario

DATA = "t,signal\n0,5.0\n1,3.1\n2,1.8\n3,1.1\n4,0.7\n"
LIGATURE = "\ufb01t"          # "ﬁt": the fi ligature, then t
FULL_WIDTH = "\uff52ate"      # "ｒate": a full-width r


@pytest.mark.parametrize("written", [LIGATURE, FULL_WIDTH])
def test_a_toml_name_the_model_reads_in_another_form_says_so(write_scenario, written):
    python_name = unicodedata.normalize("NFKC", written)            # what Python calls the argument
    model = f"import numpy as np\n\ndef model(t, {written}, k):\n    return {written} * np.exp(-k * t)\n"
    toml = ("[data]\nfile = \"data.csv\"\nx = \"t\"\ny = \"signal\"\n[model]\nfile = \"model.py\"\n"
            f"[parameters]\n\"{written}\" = {{ start = 4.0 }}\nk = {{ start = 0.5 }}\n")
    with pytest.raises(InputError) as caught:
        load_scenario(write_scenario(toml, model=model, data=DATA))
    message = str(caught.value)
    assert f"'{python_name}'" in message and "NFKC" in message and "[parameters]" in message
