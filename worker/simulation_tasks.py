"""The Celery task of semester simulations: compute one stored simulation, by id."""

from __future__ import annotations

from celery import shared_task

from feasibility.service.simulations import SIMULATE_TASK, execute_simulation

__all__ = ["simulate_semester"]


@shared_task(name=SIMULATE_TASK, acks_late=False)
def simulate_semester(simulation_id: int) -> str:
    """Compute and store simulation ``simulation_id`` (its state: done or failed)."""
    return execute_simulation(simulation_id)
