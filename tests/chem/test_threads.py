"""Structure parsing from many threads at once (the web server parses in a thread pool).

RDKit's log redirection is process-global; a thread-unsafe capture once crashed the test run with a
segmentation fault. Each thread must get its own, complete error message.
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

import pytest

from server.chem.identity import identify, parse_structure
from server.errors import ChemistryError

BAD = {"C1CC": "unclosed ring", "C(C)(C)(C)(C)C": "valence", "xyz": "SMILES"}
GOOD = {"c1ccccc1": "C6H6", "CCO": "C2H6O"}


def _one(i: int) -> tuple[str, str]:
    text = list(BAD | GOOD)[i % 5]
    try:
        return text, identify(parse_structure(text)).formula
    except ChemistryError as exc:
        return text, str(exc)


def test_parsing_in_many_threads_keeps_each_message():
    with ThreadPoolExecutor(max_workers=8) as pool:
        results = list(pool.map(_one, range(800)))
    for text, answer in results:
        if text in BAD:
            assert BAD[text].lower() in answer.lower(), (text, answer)
        else:
            assert answer == GOOD[text]


@pytest.mark.parametrize("text", list(BAD))
def test_message_still_complete_in_the_main_thread(text):
    with pytest.raises(ChemistryError) as info:
        parse_structure(text)
    assert BAD[text].lower() in str(info.value).lower()
