"""Shot-by-shot simulation of feed-forward: imaging outcomes sampled, conditioned operations using them.

Without feed-forward an imaging splits a cluster's state into one branch per
outcome pattern, all kept. With conditioned operations the pattern of each
shot decides what the sequencer plays later in that shot, so here every shot
*samples* its outcome at each imaging, from the state (the Born rule; loss,
imaging loss and the readout confusion matrix included), continues with the
projected, renormalised state, and plays each conditioned event with the
parameters of its key (outcome bit or bright count). The average over shots
of the projected states is the outcome-averaged state, so every expectation
stays unbiased; shots are grouped by outcome pattern afterwards so that the
usual per-outcome numbers can still be read.

Clusters stay separate: a cluster that a decision depends on runs before the
clusters it steers, and shot k of a data cluster uses shot k's reported
outcomes of the helper clusters and shot k's shared noise (sim/shared.py).

The same shots are run a second time *without* feed-forward: every conditioned
event plays as for one fixed key, the key nearest the mean bright count of its
selection (the best a sequencer ignoring the camera could do on average; for a
symmetric phase estimator that means no correction). Both are reported, with
per-key statistics (docs/simulation.md).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np

from ..compile.decisions import variant_of
from ..compile.timeline import Timeline
from . import engine as fast
from . import noise, observables
from .basis import _split, probabilities
from .model import G1, build_model

OUTCOME_STREAM = 0xFEED  # seed-sequence entry of the imaging-outcome stream


@dataclass
class Outcomes:
    """Per (record, site): each shot's true and reported bit (−1 until imaged)."""

    shots: int
    true: dict
    reported: dict

    def key(self, selection) -> np.ndarray:
        """Each shot's key: the number of selected sites reported bright."""
        missing = [s for s in selection.sites if (selection.record, s) not in self.reported]
        if missing:
            raise ValueError(f"record {selection.record} of site {missing[0]} is needed before it is simulated")
        return sum(self.reported[(selection.record, s)] for s in selection.sites).astype(int)


@dataclass
class _Lane:
    """One way the sequencer looks keys up: from the shot's own outcomes, or one fixed key per selection."""

    outcomes: Outcomes  # where this lane's imaging outcomes are written
    fixed: dict | None = None

    def keys(self, selection, lo: int, count: int) -> np.ndarray:
        if self.fixed is not None:
            return np.full(count, self.fixed[selection], dtype=int)
        return self.outcomes.key(selection)[lo:lo + count]


@dataclass
class FeedForwardRun:
    """Cluster results with and without feed-forward, and each shot's keys."""

    with_ff: list
    without: list
    outcomes: Outcomes
    selections: dict  # Selection → (shots,) keys with feed-forward
    fixed: dict  # Selection → the key played without feed-forward

    def summary(self, program, expect, expectation, with_ff: dict | None = None) -> dict:
        """`with`, `without` and per-key statistics of one expectation (`with_ff`: its numbers
        with feed-forward when already computed)."""
        keep = ("fidelity", "populations", "loss")
        with_ff = with_ff or expectation(program, self.with_ff, expect)
        without = expectation(program, self.without, expect)
        return {"with": {k: with_ff[k] for k in keep}, "without": {k: without[k] for k in keep},
                "keys": [self._key_stats(sel, expect) for sel in self.selections]}

    def conditioned(self, program, expect) -> list[dict]:
        """The expectation given each reported outcome of another site, from the shots that reported
        it: exact across clusters too (they share noise and steer each other)."""
        from .api import MIN_CONDITION_PROBABILITY, reduced_density
        out = []
        if len(expect.sites) > 5:
            return out
        for (record, site), bits in sorted(self.outcomes.reported.items()):
            if site in expect.sites:
                continue
            for bit in (0, 1):
                chosen = bits == bit
                if chosen.mean() < MIN_CONDITION_PROBABILITY:
                    continue
                subset = [replace(c, states=tuple(s[chosen] for s in c.states)) for c in self.with_ff]
                rho = reduced_density(subset, expect.sites)
                rho = rho / np.trace(rho).real
                numbers = observables.summarize(rho, len(expect.sites), expect.state, expect.is_ket)
                out.append({"record": record, "site": site, "outcome": bit,
                            "probability": observables.clean(chosen.mean()), **numbers})
        return out

    def _key_stats(self, selection, expect) -> dict:
        keys = self.selections[selection]
        fidelity = shot_fidelities(self.with_ff, expect)
        rows = []
        for key in selection.keys:
            chosen = keys == key
            row = {"key": key, "probability": observables.clean(chosen.mean())}
            if fidelity is not None and chosen.any():
                row["fidelity"] = observables.clean(fidelity[chosen].mean())
                if len(expect.sites) == 1:  # the phase error δ that F = (1 + cos δ)/2 implies
                    delta = np.arccos(np.clip(2 * fidelity[chosen] - 1, -1, 1))
                    row["phase_error_rms_rad"] = observables.clean(math.sqrt(np.mean(delta**2)))
            rows.append(row)
        return {"record": selection.record, "sites": list(selection.sites),
                "key_kind": "outcome" if len(selection.sites) == 1 else "bright_count",
                "fixed_key_without": self.fixed[selection], "keys": rows}


def run(runner, timeline: Timeline, groups, interactions, tracks=None) -> FeedForwardRun:
    """Every cluster shot by shot, with and without feed-forward.

    A cluster steered only by records of other clusters runs both ways in one
    batch (twice the rows, same noise and outcome draws); one steered by its own
    record runs twice, since its fixed key is known only after the first run.
    """
    program = runner.program
    conditioned = timeline.conditioned()
    models = [build_model(program, timeline, g, interactions, ladder=runner.options["ladder"], tracks=tracks)
              for g in groups]
    outcomes, unused = Outcomes(runner.shots, {}, {}), Outcomes(runner.shots, {}, {})
    fixed: dict = {}
    with_ff, without, prepared = {}, {}, {}
    for index in _order(models, conditioned):
        cluster = _Cluster(runner, models[index], index, conditioned)
        needed = cluster.selections()
        if not needed:
            with_ff[index] = without[index] = cluster.run([_Lane(outcomes)])[0]
        elif all(set(sel.sites).isdisjoint(models[index].sites) for sel in needed):
            fixed.update({sel: _fixed_key(outcomes, sel) for sel in needed})
            with_ff[index], without[index] = cluster.run([_Lane(outcomes), _Lane(unused, fixed)])
        else:
            with_ff[index] = cluster.run([_Lane(outcomes)])[0]
            fixed.update({sel: _fixed_key(outcomes, sel) for sel in needed})
            without[index] = cluster.run([_Lane(unused, fixed)])[0]
    selections = {e.decision.selection: outcomes.key(e.decision.selection) for e in conditioned}
    ordered = lambda d: [d[i] for i in range(len(models))]
    return FeedForwardRun(ordered(with_ff), ordered(without), outcomes, selections, fixed)


def _fixed_key(outcomes: Outcomes, selection) -> int:
    """The key nearest the mean bright count: what is played without feed-forward."""
    return int(np.clip(round(float(outcomes.key(selection).mean())), 0, len(selection.sites)))


def _order(models, conditioned) -> list[int]:
    """Clusters in an order where every decision's record is simulated before it is used."""
    events = {e.index: e for e in conditioned}
    needs = []
    for model in models:
        used = {c.event for seg in model.segments for c in seg.couplings if c.event in events}
        sites = {s for i in used for s in events[i].decision.selection.sites}
        needs.append(sites - set(model.sites))
    done, order = set(), []
    while len(order) < len(models):
        ready = [i for i in range(len(models)) if i not in order and needs[i] <= done]
        if not ready:
            raise ValueError("feed-forward between clusters in both directions is not supported: each cluster "
                             "needs a record of the other")
        order.append(ready[0])
        done |= set(models[ready[0]].sites)
    return order


MAX_CHUNK_ELEMENTS = 2**16  # state elements per lane in one chunk of shots


class _Cluster:
    """One cluster prepared once (model, noise draws, basis) and run for one or two lanes."""

    def __init__(self, runner, nominal, index: int, conditioned):
        from .api import _choose
        program, sources = runner.program, runner.sources
        self.runner, self.nominal, self.index = runner, nominal, index
        self.model = noise.prepare(program, nominal, sources)
        self.jumps = noise.jumps(program, self.model, sources)
        self.engine = _choose("auto" if runner.options["engine"] == "qutip" else runner.options["engine"],
                              self.jumps)
        self.density = self.engine == "lindblad"
        self.readout = {n: noise.readout_errors(program, sp, sources)
                        for n, sp in zip(self.model.sites, self.model.species)}
        shots = runner._draw(self.model)
        if shots.count < runner.shots:  # no sampled noise: one parameter row for every shot
            shots = replace(shots, initial=shots.initial * runner.shots)
        self.shots = shots
        self.basis = runner._basis(self.model, self.jumps, self.density)
        self.steer = _Steering(self.model, conditioned)
        self.loss = noise.image_loss(program, sources)

    def selections(self) -> list:
        return list({e.decision.selection: 0 for _, e in self.steer.all()})

    def run(self, lanes: list[_Lane]) -> list:
        """All shots for every lane; one ClusterResult per lane."""
        from .api import ClusterResult
        rng = np.random.default_rng([self.runner.options["seed"], OUTCOME_STREAM, self.index])
        size = self.basis.size ** (2 if self.density else 1)
        step = max(1, min(self.shots.count, MAX_CHUNK_ELEMENTS // size))
        finals, bits = [], []
        for lo in range(0, self.shots.count, step):
            chunk = _stacked(self.shots.rows(lo, lo + step), len(lanes))
            chunk = self.steer.expand(chunk)
            state, labels = self._propagate(chunk, lanes, lo, rng)
            finals.append(state.reshape((len(lanes), -1) + state.shape[1:]))
            bits.append(labels.reshape(len(lanes), state.shape[0] // len(lanes), labels.shape[-1]))
        states, labels = np.concatenate(finals, axis=1), np.concatenate(bits, axis=1)
        out = []
        for n in range(len(lanes)):
            grouped = _group(self.model, labels[n], states[n], self.steer.images)
            out.append(ClusterResult(self.nominal, self.basis, grouped[0], grouped[1], (), self.engine, self.readout))
        return out

    def _propagate(self, shots, lanes, lo: int, rng):
        """All segments for one chunk (lanes stacked); final states and true bits per imaged site."""
        basis, density = self.basis, self.density
        stepper = fast._Stepper(basis, shots, self.jumps, density)
        starts = {levels: basis.state(levels) for levels in set(shots.initial)}
        kets = np.stack([starts[levels] for levels in shots.initial])
        state = np.einsum("bi,bj->bij", kets, kets.conj()) if density else kets
        per_lane = state.shape[0] // len(lanes)
        uniform = lambda: np.tile(rng.random(per_lane), len(lanes))  # the same draws in every lane
        bits = []
        with fast.single_threaded_blas():
            for k, segment in enumerate(shots.model.segments):
                if segment.image is not None:
                    state, true = _sample_image(basis, shots.model, segment.image, state, density, self.loss,
                                                uniform)
                    _report(segment.image.record, true, self.readout, uniform, lanes, lo, per_lane,
                            [shots.model.sites[i] for i in _imaged(shots.model, segment.image)])
                    bits.append(true)
                elif segment.duration_s > 0:
                    self.steer.apply(shots, k, lanes, lo, per_lane)
                    state = stepper.step(k, segment.start_s, segment.duration_s, [state])[0]
        return state, (np.concatenate(bits, axis=1) if bits else np.zeros((state.shape[0], 0), int))


def _stacked(shots, lanes: int):
    """The chunk's rows repeated once per lane (parameters shared by every shot stay one row)."""
    if lanes == 1:
        return shots
    tile = lambda a: np.concatenate([a] * lanes) if a.shape[0] > 1 else a
    return replace(shots, couplings=tuple(map(tile, shots.couplings)), shifts=tuple(map(tile, shots.shifts)),
                   interactions=tile(shots.interactions), initial=shots.initial * lanes,
                   segment_interactions=tuple(None if a is None else tile(a) for a in shots.segment_interactions),
                   image_draws=tuple(np.concatenate([d] * lanes) for d in shots.image_draws))


class _Steering:
    """Which couplings and light shifts of which segments belong to conditioned events."""

    def __init__(self, model, conditioned):
        events = {e.index: e for e in conditioned}
        self.couplings = {k: [(j, events[c.event]) for j, c in enumerate(seg.couplings) if c.event in events]
                          for k, seg in enumerate(model.segments)}
        self.shifts = {k: [(j, events[x.event]) for j, x in enumerate(seg.shifts) if x.event in events]
                       for k, seg in enumerate(model.segments)}
        self.steered = [k for k in self.couplings if self.couplings[k] or self.shifts[k]]
        self.images = [seg.image for seg in model.segments if seg.image is not None]

    def all(self):
        return [x for k in self.steered for x in self.couplings[k] + self.shifts[k]]

    def expand(self, shots):
        """Full per-shot arrays for the steered segments (they differ shot by shot)."""
        count = shots.count
        couplings, shifts = list(shots.couplings), list(shots.shifts)
        for k in self.steered:
            couplings[k] = np.broadcast_to(couplings[k], (count,) + couplings[k].shape[1:]).copy()
            shifts[k] = np.broadcast_to(shifts[k], (count,) + shifts[k].shape[1:]).copy()
        self.base = {k: (couplings[k].copy(), shifts[k].copy()) for k in self.steered}
        return replace(shots, couplings=tuple(couplings), shifts=tuple(shifts))

    def apply(self, shots, k: int, lanes, lo: int, per_lane: int) -> None:
        """Write each shot's parameters of segment k's conditioned events, from its key."""
        if k not in self.base:
            return
        base_c, base_s = self.base[k]
        for j, event in self.couplings[k]:
            ratio, detuning, phase = self._per_shot(event, lanes, lo, per_lane)
            shots.couplings[k][:, j, 0] = base_c[:, j, 0] * ratio
            shots.couplings[k][:, j, 1] = base_c[:, j, 1] + 2 * math.pi * detuning
            shots.couplings[k][:, j, 2] = base_c[:, j, 2] + phase
        for j, event in self.shifts[k]:
            ratio, _, _ = self._per_shot(event, lanes, lo, per_lane)
            shots.shifts[k][:, j, :] = base_s[:, j, :] * ratio[:, None]

    @staticmethod
    def _per_shot(event, lanes, lo: int, per_lane: int):
        """(Rabi scale, detuning change, phase change) of each row, from its key's variant."""
        selection = event.decision.selection
        keys = np.concatenate([lane.keys(selection, lo, per_lane) for lane in lanes])
        table = np.array([_change(event, variant_of(event, k)) for k in selection.keys])
        picked = table[keys]
        return picked[:, 0], picked[:, 1], picked[:, 2]


def _change(event, variant) -> tuple[float, float, float]:
    if variant is None or event.rabi_hz == 0:
        return (0.0, 0.0, 0.0)
    return (variant.rabi_hz / event.rabi_hz, variant.detuning_hz - event.detuning_hz,
            variant.phase_rad - event.phase_rad)


def _imaged(model, image) -> list[int]:
    return [i for i, name in enumerate(model.sites) if name in image.targets]


def _sample_image(basis, model, image, state, density, loss, uniform):
    """Each shot's outcome drawn from its state; the state projected and renormalised.

    A shot whose norm was lost (decay, scattering) is lost with that probability:
    its atoms read dark and its state is zero, which keeps averages unbiased.
    """
    sites = _imaged(model, image)
    count = state.shape[0]
    lost = uniform() >= probabilities(state, density).sum(axis=1)
    true = np.zeros((count, len(sites)), dtype=int)
    for n, site in enumerate(sites):
        probs = probabilities(state, density)
        total = probs.sum(axis=1)
        bright = basis.mask(site, G1)
        p1 = np.divide(probs[:, bright].sum(axis=1), total, out=np.zeros(count), where=total > 0)
        bit = (uniform() < p1) & ~lost
        keep = bright[None, :] == bit[:, None]
        state = state * keep if not density else state * keep[:, :, None] * keep[:, None, :]
        true[:, n] = bit
    total = probabilities(state, density).sum(axis=1)
    scale = np.divide(1.0, total, out=np.zeros(count), where=(total > 0) & ~lost)
    state = state * (np.sqrt(scale)[:, None] if not density else scale[:, None, None])
    for n, site in enumerate(sites):
        p_loss, draws = loss.get(model.species[site], 0.0), uniform()
        if p_loss > 0:
            hit = (true[:, n] == 1).reshape((-1,) + (1,) * (state.ndim - 1))
            state = np.where(hit, fast._lose(basis, state, site, p_loss, draws, density), state)
    return state, true


def _report(record, true, readout, uniform, lanes, lo: int, per_lane: int, names) -> None:
    """The reported bits: true bits through the readout confusion matrix, stored per lane."""
    for n, name in enumerate(names):
        fp, fn = readout.get(name, (0.0, 0.0))
        u = uniform()
        flip = np.where(true[:, n] == 1, u < fn, u < fp)
        reported = np.where(flip, 1 - true[:, n], true[:, n])
        for m, lane in enumerate(lanes):
            rows = slice(m * per_lane, (m + 1) * per_lane)
            for store, bits in ((lane.outcomes.true, true[rows, n]), (lane.outcomes.reported, reported[rows])):
                column = store.setdefault((record, name), np.full(lane.outcomes.shots, -1))
                column[lo:lo + per_lane] = bits


def _group(model, labels: np.ndarray, states: np.ndarray, images):
    """Shots grouped by their true outcome pattern: one branch each, zero for the other shots."""
    names = [(img.record, name) for img in images for name in model.sites if name in img.targets]
    if not names:
        return (((),), (states,))
    patterns = sorted({tuple(row) for row in labels.tolist()})
    out_labels, out_states = [], []
    for pattern in patterns:
        chosen = (labels == np.array(pattern)).all(axis=1)
        shaped = chosen.reshape((-1,) + (1,) * (states.ndim - 1))
        out_labels.append(tuple((r, s, b) for (r, s), b in zip(names, pattern)))
        out_states.append(np.where(shaped, states, 0))
    return tuple(out_labels), tuple(out_states)


def shot_fidelities(clusters, expect) -> np.ndarray | None:
    """Each shot's fidelity of an expectation whose sites lie in one cluster of kets (None otherwise),
    all shots at once."""
    inside = [c for c in clusters if set(expect.sites) <= set(c.model.sites)]
    if not inside or inside[0].is_density:
        return None
    cluster = inside[0]
    keep = [cluster.model.sites.index(s) for s in expect.sites]
    target = observables.target_state(expect.state.strip("|>"), expect.is_ket)
    inner, outer, count = _split(cluster.basis, keep, 2)
    inside_rows = (cluster.basis.levels[:, keep] < 2).all(axis=1)
    total = np.zeros(cluster.shots)
    for state in cluster.states:
        overlap = np.zeros((state.shape[0], count), dtype=complex)
        weights = np.conj(target[inner[inside_rows]])[None] * state[:, inside_rows]
        np.add.at(overlap, (slice(None), outer[inside_rows]), weights)
        total += (np.abs(overlap) ** 2).sum(axis=1)
    return total
