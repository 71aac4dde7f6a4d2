"""One analysis of long data on a Dask cluster, with the in-memory engine's numbers.

Passes over the data (each one task per piece, merged pairwise):

1. with ``missing="mean"`` only: the count and sum of the observed values of
   each column, for the means that fill the gaps (mean filling needs the means
   before the moments, so it costs one pass more);
2. the moments: count, means, centred cross-product, minima and maxima
   (Chan, Golub & LeVeque 1983, :mod:`webapp.analysis.moments`), the counts of
   dropped and filled values, and a uniform random sample of rows;
3. after one small eigendecomposition on the machine that started the fit
   (:func:`webapp.analysis.pca.fit_pca_from_cross_product`): scores, T² and Q
   of every row, part by part.

Between passes 2 and 3, centring and scaling come from the moments
(:func:`webapp.analysis.impute.divisors_from_summary`), parallel analysis runs
on the sample (all rows when there are at most ``SAMPLE_ROWS``, so that short
data get exactly the in-memory advice), and K and the limits are the in-memory
engine's (:func:`webapp.analysis.pipeline.control_limits`). Iterative
imputation needs every row at once and is refused.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import SimpleNamespace

import numpy as np

from webapp.analysis.errors import OrdinateError
from webapp.analysis.impute import divisors_from_summary
from webapp.analysis.pca import PCAFit, fit_pca_from_cross_product
from webapp.analysis.pipeline import control_limits, resolve_components, sample_advice
from webapp.analysis.recipe import MIN_SAMPLES, Preprocessor, Recipe, require_shape, resolve_variables
from webapp.analysis.selection import ComponentAdvice, advise_components
from webapp.distributed import blocks
from webapp.distributed.sources import Source, read_piece

SAMPLE_ROWS = 20_000  # rows for parallel analysis
PER_SAMPLE_LIMIT = 100_000  # up to this many rows, every row's scores, T² and Q are returned


@dataclass(frozen=True, eq=False)
class LongAnalysis:
    recipe: Recipe
    preprocessor: Preprocessor
    pca: PCAFit  # scores empty: see ``scored``
    advice: ComponentAdvice
    components: int
    confidence: float
    limits: tuple[float, float, str]
    scored: blocks.Scored
    every_row: bool  # ``scored`` holds every row (else the most extreme flagged ones)
    sample_size: int
    pieces: int
    files: int
    warnings: tuple[str, ...]
    seconds: dict  # wall time of each pass and of the fit on this machine

    @property
    def variables(self) -> tuple[str, ...]:
        return self.preprocessor.variables


def source_id_column(source: Source, id_column: str | None) -> str | None:
    """The sample-ID column: the one asked for, else detected on the first rows as the in-memory reader does."""
    if id_column is not None:
        if id_column not in source.columns:
            raise OrdinateError(f"The label column '{id_column}' is not in the data.")
        return id_column
    from webapp.analysis.ingest.roles import find_id_column

    return find_id_column(source.head, source.numeric_columns, source.text_columns)


@dataclass(frozen=True, eq=False)
class LongFit:
    """The model of a long-data fit (passes 1 and 2 and the eigendecomposition), before any scoring."""

    recipe: Recipe
    preprocessor: Preprocessor  # the variables kept, their transforms, centre and scale
    pca: PCAFit
    advice: ComponentAdvice
    plan: blocks.Plan  # with the rows before each piece
    kept: np.ndarray  # mask over the chosen variables (zero-variance ones left out)
    sample: np.ndarray  # the uniform random sample of rows, preprocessed, in file order
    sample_keys: np.ndarray  # their random keys (the smallest m keys are a uniform sample of m rows)
    sample_labels: np.ndarray
    spread: np.ndarray  # standard deviation of each kept variable after preprocessing (ddof = 1)
    pieces: int
    files: int
    warnings: tuple[str, ...]
    seconds: dict

    @property
    def n_samples(self) -> int:
        return self.pca.n_samples


def analyse_long(source: Source, recipe: Recipe, client, *, components="auto", confidence: float = 0.95,
                 seed: int = 0, sample_rows: int = SAMPLE_ROWS, per_sample_limit: int = PER_SAMPLE_LIMIT,
                 progress=None) -> LongAnalysis:
    """Fit ``recipe`` to the rows of ``source`` on the cluster of ``client``, then score every row."""
    if not 0 < confidence < 1:
        raise OrdinateError(f"The confidence level must be between 0 and 1 (for example 0.95); got {confidence}.")
    fit = fit_long(source, recipe, client, seed=seed, sample_rows=sample_rows, progress=progress)
    clock = _Clock()
    k = resolve_components(SimpleNamespace(pca=fit.pca, advice=fit.advice), components)
    limits = control_limits(fit.pca, k, confidence)
    pre = fit.preprocessor
    model = blocks.Model(fit.kept, pre.centre, pre.scale, fit.pca, k, limits[0], limits[1],
                         keep_rows=fit.n_samples <= per_sample_limit)
    scored = run_pass(client, source, blocks.score, blocks.merge_scored, (fit.plan, model), (model,),
                      progress=_phase(progress, "scores"))
    clock.lap("scores")
    order = np.lexsort((scored.order[:, 1], scored.order[:, 0]))
    scored = blocks.Scored(scored.labels[order], None if scored.scores is None else scored.scores[order],
                           scored.t2[order], scored.q[order], scored.t2_over, scored.q_over, scored.order[order])
    if model.keep_rows and len(set(scored.labels.tolist())) != scored.labels.size:
        raise OrdinateError(
            f"The column '{fit.plan.id_column}' cannot label samples: some labels repeat or are blank. "
            "Choose a column whose values are all different."
        )
    return LongAnalysis(recipe, pre, fit.pca, fit.advice, k, float(confidence), limits, scored, model.keep_rows,
                        fit.sample.shape[0], fit.pieces, fit.files, fit.warnings, {**fit.seconds, **clock.laps})


def fit_long(source: Source, recipe: Recipe, client, *, seed: int = 0, sample_rows: int = SAMPLE_ROWS,
             progress=None) -> LongFit:
    """The passes that fit the model (means when filling, moments), then the eigendecomposition and advice.

    ``progress(phase, done, total)``, when given, is called as pieces finish.
    """
    if recipe.missing == "iterative":
        raise OrdinateError(
            "Iterative imputation is not available for long data (it needs every row in memory at once). "
            "Choose mean filling or leaving samples out, or analyse a file that fits in memory."
        )
    clock = _Clock()
    id_column = source_id_column(source, recipe.id_column)
    variables = resolve_variables(source, recipe, id_column)
    plan = blocks.Plan(
        variables=variables,
        transforms=tuple(recipe.transform_for(v) for v in variables),
        id_column=id_column,
        excluded=frozenset(recipe.excluded_samples),
        missing=recipe.missing,
        row_offsets=source.row_offsets(),
        sample_rows=int(sample_rows),
        seed=int(seed),
        sample_threshold=_sample_threshold(source, int(sample_rows)),
    )
    if plan.excluded and id_column is None and plan.row_offsets is None:
        plan = _replace(plan, row_offsets=_count_rows(source, client))
    plan = _replace(plan, shift=blocks.shift_from_head(source.head, plan))
    warnings: list[str] = []
    clock.lap("set_up")
    if recipe.missing == "mean":
        plan = _replace(plan, fill=_observed_means(source, client, plan, _phase(progress, "means")))
        clock.lap("means")
    summary = run_pass(client, source, blocks.summarise, blocks.merge_summaries, (plan,), (plan.sample_rows,),
                       progress=_phase(progress, "moments"))
    offsets = np.concatenate([[0], np.cumsum([summary.read_rows[i] for i in range(len(source.pieces))])[:-1]])
    plan = _replace(plan, row_offsets=offsets.astype(np.int64))
    clock.lap("moments")
    _note_rows(summary, plan, recipe, warnings)

    moments = summary.moments
    n = moments.count
    require_shape(n, len(variables), recipe)
    centre = moments.column_means if recipe.centring == "mean" else np.zeros(len(variables))
    scale, zero = divisors_from_summary(recipe.scaling, moments.minimum, moments.maximum,
                                        moments.std if n > 1 else np.zeros(len(variables)))
    kept = ~zero
    if zero.any():
        dropped = [v for v, z in zip(variables, zero) if z]
        warnings.append(
            f"Left out {len(dropped)} variable(s) with no variation, which cannot be scaled: {_short_list(dropped)}."
        )
        require_shape(n, int(kept.sum()), recipe)
    cross = moments.cross if recipe.centring == "mean" else moments.cross + n * np.outer(
        moments.column_means, moments.column_means)
    cross = cross[np.ix_(kept, kept)] / np.outer(scale[kept], scale[kept])
    if progress is not None:
        progress("advice", 0, 0)
    pca = fit_pca_from_cross_product(cross, n)
    spread = np.sqrt(np.maximum(np.diag(moments.cross)[kept], 0.0) / max(n - 1, 1)) / scale[kept]

    centre, scale = centre[kept], scale[kept]
    clock.lap("eigendecomposition")
    order = np.lexsort((summary.sample_where[:, 1], summary.sample_where[:, 0]))
    sample = (summary.sample_values[order][:, kept] - centre) / scale
    advice = sample_advice(pca, sample, seed=seed,
                           fallback=advise_components(pca.eigenvalues, pca.total_variance, pca.n_variables))
    clock.lap("parallel_analysis")
    kept_variables = tuple(v for v, z in zip(variables, zero) if not z)
    preprocessor = Preprocessor(kept_variables, tuple(t for t, z in zip(plan.transforms, zero) if not z),
                                centre, scale, recipe)
    labels = _sample_labels(summary, plan)[order]
    return LongFit(recipe, preprocessor, pca, advice, plan, kept, sample, summary.sample_keys[order], labels,
                   spread, len(source.pieces), len(source.files), tuple(warnings), clock.laps)


def _sample_labels(summary: blocks.Summary, plan: blocks.Plan) -> np.ndarray:
    """Labels of the sampled rows: their label column's values, else ``row N`` over the whole file order."""
    labels = np.empty(summary.sample_where.shape[0], dtype=object)
    for i, ((piece, row), label) in enumerate(zip(summary.sample_where, summary.sample_labels)):
        labels[i] = label if label is not None else f"row {int(plan.row_offsets[piece]) + int(row) + 1}"
    return labels


def _phase(progress, name: str):
    return None if progress is None else (lambda done, total: progress(name, done, total))


class _Clock:
    def __init__(self):
        import time

        self._now = time.perf_counter
        self._last = self._now()
        self.laps: dict[str, float] = {}

    def lap(self, name: str) -> None:
        now = self._now()
        self.laps[name] = now - self._last
        self._last = now


# --- passes ----------------------------------------------------------------------


def run_pass(client, source: Source, step, merge, step_args: tuple, merge_args: tuple, *, progress=None):
    """One pass: ``step`` on every piece, results merged pairwise; errors become OrdinateError.

    ``progress(done, total)`` is called as the pieces finish (from this thread).
    A worker that dies is replaced and its tasks rerun by Dask (up to its
    ``allowed-failures``, 3 by default); beyond that the pass fails here.
    """
    import dask
    from distributed import KilledWorker, as_completed

    # Reading and the step are one task: the piece never waits in a worker's memory as a result of its own.
    first = [dask.delayed(_read_and_step, pure=False)(piece, source.columns, i, step, step_args)
             for i, piece in enumerate(source.pieces)]
    level = first
    while len(level) > 1:
        merged = [dask.delayed(merge)(level[i], level[i + 1], *merge_args) for i in range(0, len(level) - 1, 2)]
        level = merged + ([level[-1]] if len(level) % 2 else [])
    try:
        if progress is None:
            return client.compute(level[0]).result()
        # One graph: the pieces' futures share their keys with the merge tree's inputs.
        futures = client.compute([*first, level[0]] if len(first) > 1 else [level[0]])
        pieces, top = futures[:-1] or futures, futures[-1]
        done = 0
        progress(0, len(first))
        for future in as_completed(pieces):
            if future.status == "error":
                future.result()  # raises the piece's error
            done += 1
            if future is not top:
                future.release()
            progress(done, len(first))
        return top.result()
    except OrdinateError:
        raise
    except KilledWorker as error:
        raise OrdinateError(
            f"A Dask worker died while reading the data, and the retries failed too ({error}). "
            "Check the workers' memory and logs, then try again."
        ) from None
    except (OSError, MemoryError) as error:
        raise OrdinateError(f"The fit failed on the cluster ({error}).") from None


_run = run_pass  # the name the engine's own passes use


def _read_and_step(piece, columns, index: int, step, step_args: tuple):
    return step(read_piece(piece, columns), index, piece.path, *step_args)


def _sample_threshold(source: Source, sample_rows: int) -> float:
    """A key bound that keeps about sample_rows + 6 standard deviations of rows, when the row count is known.

    The sample is the rows with the smallest uniform keys; a piece need not
    send rows whose key lies above this bound, which the sample_rows smallest
    keys exceed with probability below 1e-9. Should it happen, the sample is
    still a uniform random one, only smaller.
    """
    offsets = source.row_offsets()
    if offsets is None:
        return 1.0
    total = int(offsets[-1]) + int(source.pieces[-1].rows)
    if total <= sample_rows:
        return 1.0
    return min(1.0, (sample_rows + 6 * np.sqrt(sample_rows) + 10) / total)


def _count_rows(source: Source, client) -> np.ndarray:
    plan = blocks.Plan((), (), None, frozenset(), "keep")
    summary = _run(client, source, _piece_rows, _merge_rows, (plan,), ())
    counts = [summary[i] for i in range(len(source.pieces))]
    return np.concatenate([[0], np.cumsum(counts)[:-1]]).astype(np.int64)


def _piece_rows(frame, index: int, path: str, plan) -> dict[int, int]:
    return {index: len(frame)}


def _merge_rows(a: dict, b: dict) -> dict:
    return {**a, **b}


def _observed_means(source: Source, client, plan: blocks.Plan, progress=None) -> np.ndarray:
    counts, sums = _run(client, source, blocks.observed_sums, blocks.add_sums, (plan,), (), progress=progress)
    empty = [v for v, c in zip(plan.variables, counts) if c == 0]
    if empty:
        raise OrdinateError(
            f"The variable(s) {_short_list(empty)} have no values in the samples used. Leave them out of the analysis."
        )
    return sums / counts


# --- recipe steps ------------------------------------------------------------------


def _note_rows(summary: blocks.Summary, plan: blocks.Plan, recipe: Recipe, warnings: list[str]) -> None:
    unknown = sorted(plan.excluded - summary.excluded_found)
    if unknown:
        warnings.append(f"Ignored {len(unknown)} excluded sample label(s) not found in the data: {_short_list(unknown)}.")
    if summary.dropped:
        shown = [label if label is not None else f"row {int(plan.row_offsets[piece]) + row + 1}"
                 for piece, row, label in summary.first_dropped]
        more = f" and {summary.dropped - len(shown)} more" if summary.dropped > len(shown) else ""
        warnings.append(
            f"Left out {summary.dropped} sample(s) with missing values: {', '.join(repr(s) for s in shown)}{more}. "
            "Choose mean or iterative filling to keep them."
        )
        if summary.moments.count < MIN_SAMPLES:
            raise OrdinateError(
                f"Only {summary.moments.count} sample(s) have no missing values, too few for PCA. "
                "Choose mean filling of missing values instead of leaving samples out."
            )
    if summary.filled:
        warnings.append(f"Filled {summary.filled} missing value(s) with their variable's mean.")


def _replace(plan: blocks.Plan, **changes) -> blocks.Plan:
    from dataclasses import replace

    return replace(plan, **changes)


def _short_list(items, limit: int = 6) -> str:
    items = [str(item) for item in items]
    shown = ", ".join(f"'{item}'" for item in items[:limit])
    return shown + (f" and {len(items) - limit} more" if len(items) > limit else "")
