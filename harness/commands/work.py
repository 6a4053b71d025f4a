"""The work of one run: the cells still missing from the store and the searches of tuned
strategies, handed to the executor unit by unit as they become ready (`WorkSource`), and
every finished row stored in its own transaction.

A search (`harness.search`) hands out its trials in order and its refits as soon as the
trials they depend on are stored, so the workers never wait for a whole search to end and two
workers stay busy even with one dataset. What is stored already (by this run or an earlier
one, under this search or another with the same units) is reused, not run again: an
interrupted run redoes at most the units that were in flight. When a search has all it
needs, its tuned cell is composed (`Store.put_tuned`).

A budget in seconds counts the wall time of the search's finished trials (as stored: their
``fit_seconds``); the search hands out no trial once it is spent, so it may run over by the
trials in flight.
"""

from __future__ import annotations

from collections import deque
from typing import Any

import numpy as np

from harness.execution.executor import WorkSource
from harness.search import Search, Trial, best_of, budget_steps, halving_rounds
from harness.store import Store
from harness.work_units import ERROR, OK, Cell, failed_row


class SearchRun:
    """The state of one search during a run."""

    def __init__(self, search: Search, work: "RunWork") -> None:
        self.s, self.work = search, work
        self.t = search.tuning
        self.n = len(search.configs)
        self.queue: deque = deque()          # units ready to hand out
        self.waiting: set[str] = set()       # keys handed out, not back yet
        self.trials: dict[tuple[int, int], dict] = {}   # (round, number) -> row
        self.refits: dict[int, dict] = {}    # number -> row
        self.refit_number: dict[str, int] = {}  # refit key -> configuration number
        self.next_number = 0
        self.spent = 0.0
        self.final: int | None = None        # the configuration of the tuned result
        self.composed = False
        if self.s.halving:
            train = len(search.cell.train)
            inner_rows = train - -(-train // self.t.inner_folds)
            self.rounds = halving_rounds(self.n, inner_rows, self.t.factor)
            self.round = 0
            self._ask_refit(0)  # the untuned score
            self._offer_round(list(range(self.n)))

    @property
    def done(self) -> bool:
        return self.composed and not self.queue and not self.waiting

    # ------------------------------------------------------------------ handing out
    def _offer(self, unit) -> None:
        """Queue ``unit`` unless its result is stored already (then take that)."""
        if isinstance(unit, Trial):
            stored = self.work.stored_trial(unit.key, self.s.key)
        else:
            stored = self.work.stored_refit(unit.key, self.s.key, self.refit_number[unit.key])
        if stored is not None:
            self._record(unit, stored)
        else:
            self.queue.append(unit)

    def _offer_round(self, numbers: list[int]) -> None:
        rows = self.rounds[self.round][1]
        self.round_numbers = numbers
        for number in numbers:
            self._offer(self.s.trial(number, self.round, rows))

    def _ask_refit(self, number: int) -> None:
        if number not in self.refit_number.values():
            unit = self.s.refit(number)
            self.refit_number[unit.key] = number
            self._offer(unit)

    def take(self):
        if not self.s.halving:  # random search: trials one by one, while the budget lasts
            while not self.queue and self.next_number < self.n and self._budget_left():
                number = self.next_number
                self.next_number += 1
                self._offer(self.s.trial(number))
        if self.queue:
            unit = self.queue.popleft()
            self.waiting.add(unit.key)
            return unit
        return None

    def _budget_left(self) -> bool:
        return self.t.seconds is None or self.spent < self.t.seconds

    # ------------------------------------------------------------------ results
    def accept(self, unit, row: dict[str, Any]) -> None:
        """A row the executor yielded for one of this search's units: store, record."""
        self.waiting.discard(unit.key)
        if isinstance(unit, Trial):
            self.work.store.put_trial({**row, "search": self.s.key}, self.work.run)
        else:
            self.work.store.put_refit(self.s.key, self.refit_number[unit.key], row,
                                      self.work.run)
        self._record(unit, row)

    def _record(self, unit, row: dict[str, Any]) -> None:
        if isinstance(unit, Trial):
            self.trials[(unit.round, unit.number)] = row
            self.spent += float(row.get("fit_seconds") or row.get("seconds") or 0.0)
        else:
            self.refits[self.refit_number[unit.key]] = row
        if self.s.halving:
            self._advance_halving()
        else:
            self._advance_random()
        if not self.composed and self._trials_over() and (
                self.final is None or self.final in self.refits):
            self.composed = True
            self.work.compose(self)

    def _score(self, round_: int, number: int) -> float:
        row = self.trials.get((round_, number))
        return row["inner_score"] if row and row["status"] == OK else np.nan

    def _prefix(self) -> int:
        """How many trials, from the first, are back."""
        b = 0
        while (0, b) in self.trials:
            b += 1
        return b

    def _trials_over(self) -> bool:
        if self.s.halving:
            return self.round == len(self.rounds) - 1 and all(
                (self.round, n) in self.trials for n in self.round_numbers)
        issued_all = self.next_number >= self.n or not self._budget_left()
        return issued_all and self._prefix() == self.next_number

    def _advance_random(self) -> None:
        scores = [self._score(0, n) for n in range(self._prefix())]
        over = self._trials_over()
        steps = budget_steps(len(scores)) if over else \
            [b for b in budget_steps(len(scores)) if b & (b - 1) == 0]
        for b in steps:
            best = best_of(scores[:b])
            if best is not None:
                self._ask_refit(best)
        if over:
            self.final = best_of(scores)

    def _advance_halving(self) -> None:
        while all((self.round, n) in self.trials for n in self.round_numbers):
            scores = {n: self._score(self.round, n) for n in self.round_numbers}
            ranked = sorted((n for n in self.round_numbers if np.isfinite(scores[n])),
                            key=lambda n: (-scores[n], n))  # best first, earliest on a tie
            if self.round == len(self.rounds) - 1 or not ranked:
                self.round = len(self.rounds) - 1
                self.final = ranked[0] if ranked else None
                if self.final is not None:
                    self._ask_refit(self.final)
                return
            self.round += 1
            self._offer_round(sorted(ranked[:self.rounds[self.round][0]]))

    # ------------------------------------------------------------------ the tuned cell
    def tuned_rows(self) -> tuple[dict[str, Any], dict[str, Any]]:
        """(the tuned cell's row, its ``tuned`` row) from the trials and the refit."""
        c = self.s.cell
        trials = list(self.trials.values())
        wall = sum(float(r.get("fit_seconds") or r.get("seconds") or 0.0) for r in trials)
        cpu = sum(float(r.get("fit_cpu_seconds") or 0.0) for r in trials)
        tuned = {"search_kind": self.t.search, "budget": self.t.budget_text(),
                 "trials": len(trials), "chosen": self.final, "configuration": None,
                 "inner_score": None, "search_seconds": wall, "search_cpu_seconds": cpu}
        if self.final is None:
            first = next((r["message"] for r in trials if r.get("message")), "")
            return failed_row(c, ERROR, f"every trial of the search failed: {first}"[:500]), \
                tuned
        refit = self.refits[self.final]
        last_round = len(self.rounds) - 1 if self.s.halving else 0
        tuned.update(configuration=self.s.values(self.final),
                     inner_score=self._score(last_round, self.final),
                     refit_seconds=refit.get("fit_seconds"),
                     refit_cpu_seconds=refit.get("fit_cpu_seconds"))
        row = {**refit, **c.identity(), "key": c.key}
        if refit["status"] == OK:
            row["fit_seconds"] = refit["fit_seconds"] + wall
            row["fit_cpu_seconds"] = refit["fit_cpu_seconds"] + cpu
        else:
            row["message"] = f"refit of the chosen configuration: {refit.get('message', '')}"
        row["seconds"] = float(refit.get("seconds") or 0.0) + sum(
            float(r.get("seconds") or 0.0) for r in trials)
        return row, tuned


class RunWork(WorkSource):
    """Cells and searches of one run, for an executor; stores every row it is given."""

    def __init__(self, cells: list[Cell], searches: list[Search], store: Store, run: int,
                 *, retry_failed: bool = False) -> None:
        self.cells = deque(cells)
        self.store, self.run, self.retry = store, run, retry_failed
        self.out: dict[str, tuple[Any, list[SearchRun]]] = {}  # key -> (unit, its searches)
        self.statuses: list[bool] = []  # of every cell and tuned cell stored: ok or not
        self.trials_run = 0
        self.searches = [SearchRun(s, self) for s in searches]

    def stored_trial(self, key: str, search: str) -> dict | None:
        """A stored trial with this key (under this search or another: the same key is the
        same computation; copied to this search)."""
        found = self.store.stored_trials([key], include_failed=not self.retry).get(key)
        if found is not None and found.get("search") != search:
            self.store.put_trial({**found, "search": search}, found.get("run") or self.run)
        return found

    def stored_refit(self, key: str, search: str, number: int) -> dict | None:
        found = self.store.stored_refits([key], include_failed=not self.retry)
        if key not in found:
            return None
        if search not in found[key]["searches"]:
            self.store.put_refit(search, number, found[key]["row"], self.run)
        return found[key]["row"]

    def take(self):
        for sr in self.searches:
            if sr.done:
                continue
            unit = sr.take()
            if unit is not None:
                if unit.key in self.out:  # another search asked for the same computation
                    self.out[unit.key][1].append(sr)
                    continue
                self.out[unit.key] = (unit, [sr])
                return unit
        return self.cells.popleft() if self.cells else None

    def accept(self, row: dict[str, Any]) -> None:
        """Store a row the executor yielded, and whatever it completes."""
        unit, owners = self.out.pop(row["key"], (None, None))
        if owners is None:
            self.store.put(row, self.run)
            self._count(row)
            return
        self.trials_run += isinstance(unit, Trial)
        for sr in owners:
            sr.accept(unit, row)

    def compose(self, sr: SearchRun) -> None:
        cell_row, tuned = sr.tuned_rows()
        self.store.put_tuned(cell_row, tuned, self.run)
        self._count(cell_row)

    def _count(self, row: dict[str, Any]) -> None:
        self.statuses.append(row["status"] == OK)

    @property
    def finished_cells(self) -> int:
        return len(self.statuses)

    @property
    def failed_cells(self) -> int:
        return self.statuses.count(False)
