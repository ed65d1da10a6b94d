"""``[stress]`` in pack.toml: the settings of the "Stress and scenarios" chapter.

Its own small schema, imported by :mod:`reporter.config` (which reports its problems as
``pack.toml:stress.<key>: message`` with every other one). Whether a named scenario's window
lies inside the history is known only once the data are read: see
:func:`reporter.analytics.stress.scenario_windows` (run by the build and by ``check``).
"""

from __future__ import annotations

import datetime as dt
from typing import Annotated

from pydantic import BaseModel, ConfigDict, Field, model_validator

DEFAULT_SHOCKS = (-0.10, -0.20, -0.30)
DEFAULT_LEVELS = (0.95, 0.99)

# a market move as a decimal: above -100% (a fall of all the value) and at most +1000%
Shock = Annotated[float, Field(gt=-1.0, le=10.0)]
Level = Annotated[float, Field(gt=0.5, lt=1.0)]


class _Strict(BaseModel):
    # allow_inf_nan=False: nan and inf (which TOML allows) are refused by every float key
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


class StressScenario(_Strict):
    """One ``[[stress.scenarios]]`` window, replayed on today's holdings."""

    name: Annotated[str, Field(min_length=1, max_length=80)]
    start: dt.date
    end: dt.date

    @model_validator(mode="after")
    def _ordered(self) -> StressScenario:
        if self.end < self.start:
            raise ValueError(f"the scenario {self.name!r} ends ({self.end}) before it starts "
                             f"({self.start})")
        return self


class StressSection(_Strict):
    """``[stress]``: market shocks added to -10%, -20% and -30%; the confidence levels of value
    at risk and expected shortfall; the stationary bootstrap's draws and mean block length
    (default: n^(1/3) periods, rounded); the backtest's level and trailing window (default: the
    ``[analysis]`` window); named historical scenarios."""

    market_shocks: list[Shock] = []
    levels: Annotated[list[Level], Field(min_length=1, max_length=4)] = list(DEFAULT_LEVELS)
    bootstrap_draws: Annotated[int, Field(ge=100, le=20_000)] = 1000
    block_length: Annotated[float, Field(ge=1.0, le=10_000.0)] | None = None
    backtest_level: Level = 0.95
    backtest_window: Annotated[int, Field(ge=10, le=100_000)] | None = None
    scenarios: Annotated[list[StressScenario], Field(max_length=50)] = []

    @property
    def shocks(self) -> tuple[float, ...]:
        """Every market shock, the defaults first, each once, largest fall last."""
        return tuple(sorted(set(DEFAULT_SHOCKS) | set(self.market_shocks), reverse=True))
