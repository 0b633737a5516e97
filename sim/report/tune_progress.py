"""The tuner's progress bar (rich, on standard error)."""

from __future__ import annotations

from contextlib import contextmanager

__all__ = ["tune_progress"]


@contextmanager
def tune_progress(generations: int, *, enabled: bool = True):
    """Yield a callback that shows each generation: index, best score, feasibility.

    Parameters
    ----------
    generations : int
        Generations after the initial population (the bar has ``generations + 1`` steps).
    enabled : bool
        ``False`` yields a callback that does nothing (quiet runs, tests).
    """
    if not enabled:
        yield lambda gen: None
        return
    from rich.console import Console
    from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn, TimeElapsedColumn

    console = Console(stderr=True)
    with Progress(
        TextColumn("tuning"),
        BarColumn(),
        MofNCompleteColumn(),
        TimeElapsedColumn(),
        TextColumn("{task.description}"),
        console=console,
        transient=False,
    ) as bar:
        task = bar.add_task("initial population", total=generations + 1)

        def show(gen) -> None:
            if gen.best_feasible:
                best = f"best score {gen.best_score:.4g} (feasible)"
            else:
                best = f"no feasible candidate yet (closest misses by {gen.best_fitness - 100.0:.3g})"
            bar.update(
                task,
                advance=1,
                description=f"gen {gen.index}: {best}; {gen.n_feasible}/{gen.population} feasible",
            )

        yield show
