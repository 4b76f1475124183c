"""A coupled plant in a random, strained state (the cuffs stretched, both arms moving), for the plant tests."""

from __future__ import annotations

import numpy as np

import models
from sim.physics.plant import CoupledPlant, PlantParams


def random_plant(seed: int, mode: str = "coupled", params: PlantParams | None = None) -> CoupledPlant:
    rng = np.random.default_rng(seed)
    asm = models.assemble("m50", q_human0=np.radians([30, 10, 0, 60, 0, 0, 0]))
    plant = CoupledPlant(asm, PlantParams() if params is None else params, mode)
    plant.q_exo[:] += rng.normal(scale=0.05, size=plant.exo.nq)  # [rad]: the cuffs stretch
    plant.q_human[:] += rng.normal(scale=0.05, size=plant.human.nq)
    plant.v_exo[:] = rng.normal(scale=0.5, size=plant.exo.nv)  # [rad/s]
    plant.v_human[:] = rng.normal(scale=0.5, size=plant.human.nv)
    plant.invalidate()
    return plant
