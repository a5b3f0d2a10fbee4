"""A generated corpus: the maintenance log of an invented fleet of bottling-plant machines.

Lines follow a small grammar with dependencies a character model can learn at several ranges:
timestamps that only move forward, readings whose value decides the status word later on the
line, and tickets opened by a warning that a later line closes under the same number.
"""

from __future__ import annotations

import dataclasses
from datetime import datetime, timedelta

import numpy as np

from loopzoo._checks import integer
from loopzoo.tasks._base import split_generators
from loopzoo.tasks._catalog import TASKS
from loopzoo.tasks._text import CharacterTask, TextOptions

__all__ = ["FleetLogTask", "generate_fleet_log"]

# machine family -> (reading name, unit, normal range, warning threshold)
FAMILIES = {
    "filler": ("flow", "l/min", (38.0, 46.0), 49.0),
    "capper": ("torque", "Nm", (2.0, 3.2), 3.6),
    "labeller": ("speed", "m/s", (1.1, 1.6), 1.8),
    "conveyor": ("vibration", "mm/s", (0.4, 1.9), 2.6),
}
START = datetime(2031, 3, 1)
TECHNICIANS = ("A.Moreau", "K.Osei", "L.Brandt", "S.Iyer", "T.Halvorsen")
REPAIRS = ("replaced seal", "realigned belt", "tightened coupling", "swapped sensor",
           "cleaned nozzle", "recalibrated drive")


def generate_fleet_log(lines: int, rng: np.random.Generator) -> str:
    """``lines`` log lines (newline-terminated) of four machines of each family.

    Example line: "2031-03-02 06:15 capper-2 torque 3.71 Nm WARN ticket 0007"
    """
    machines = [f"{family}-{n}" for family in FAMILIES for n in range(1, 5)]
    minutes, next_ticket, open_tickets, out = 0, 1, [], []
    for _ in range(lines):
        minutes += int(rng.integers(1, 40))
        stamp = (START + timedelta(minutes=minutes)).strftime("%Y-%m-%d %H:%M")
        if open_tickets and rng.random() < 0.3:
            machine, ticket = open_tickets.pop(int(rng.integers(len(open_tickets))))
            technician = TECHNICIANS[int(rng.integers(len(TECHNICIANS)))]
            repair = REPAIRS[int(rng.integers(len(REPAIRS)))]
            out.append(f"{stamp} {machine} closed ticket {ticket:04d} by {technician}: {repair}")
            continue
        machine = machines[int(rng.integers(len(machines)))]
        reading, unit, (low, high), threshold = FAMILIES[machine.split("-")[0]]
        # mostly in the normal range; otherwise drifting up, past the threshold about half the time
        drifting = rng.random() >= 0.85
        value = rng.uniform(high, threshold * 1.2) if drifting else rng.uniform(low, high)
        if value < threshold:
            out.append(f"{stamp} {machine} {reading} {value:.2f} {unit} OK")
        else:
            out.append(f"{stamp} {machine} {reading} {value:.2f} {unit} WARN ticket "
                       f"{next_ticket:04d}")
            open_tickets.append((machine, next_ticket))
            next_ticket += 1
    return "\n".join(out) + "\n"


@dataclasses.dataclass(frozen=True)
class FleetLogOptions(TextOptions):
    lines: int = 1500  # log lines generated (about 50 characters each); at most 100,000

    def __post_init__(self) -> None:
        super().__post_init__()
        integer("lines", self.lines, minimum=1, maximum=100_000)


@TASKS.register("fleet-log")
class FleetLogTask(CharacterTask):
    """Next-character prediction on a seeded maintenance log of an invented machine fleet.

    x[:, t] = one_hot(c_t) over the log's characters, y[:, t] = c_{t+1}; chunks of ``length``.
    Metric: bits per character. Baselines "unigram" and "bigram".

    Example:
        >>> task = loopzoo.tasks.create("fleet-log", seed=0, lines=3000, length=128)
    """

    name = "fleet-log"
    Options = FleetLogOptions
    seed_changes_data = True  # the seed draws a different log

    def __init__(self, seed: int = 0, **options: object) -> None:
        super().__init__(seed, **options)
        self.source = "generated fleet log"
        rng = split_generators(self.name, self.seed)["train"]  # one stream: the log is one text
        self.text = generate_fleet_log(self.options.lines, rng)
        self._prepare_text()
