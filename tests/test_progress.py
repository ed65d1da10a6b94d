"""Stage lines in a pipe: a fund's parts are named, and each stage's time is summed over them."""

import io
import time

from reporter.progress import Progress


def test_fund_parts_are_named_and_times_summed():
    out = io.StringIO()
    p = Progress(stream=out)
    for part in ("Total fund", "Growth equity"):
        with p.stage("analyse", part):
            time.sleep(0.01)
    with p.stage("pdf"):
        pass
    lines = out.getvalue().splitlines()
    assert [line.split(" done ")[0] for line in lines] == [
        "reporter: analyse (Total fund)", "reporter: analyse (Growth equity)", "reporter: pdf"]
    assert set(p.times) == {"analyse", "pdf"}
    assert p.times["analyse"] >= 0.02            # both parts' time under one name


def test_quiet_prints_nothing_but_still_times():
    out = io.StringIO()
    p = Progress(quiet=True, stream=out)
    with p.stage("read", "Total fund"):
        pass
    assert out.getvalue() == "" and "read" in p.times
