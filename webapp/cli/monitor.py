"""`ordinate monitor` (add an upload to a locked reference model) and `ordinate models` (list them).

A pipeline can run ``ordinate monitor`` after each instrument export::

    ordinate monitor https://ordinate.lab/m/<code> run-0412.csv --order-column sampled_at --data-dir /srv/ordinate

MODEL is a monitoring link (or its code), or a model JSON file written by
``ordinate analyze --model``. A file is locked in the data directory the first
time, with ``--reference`` (the data the model was fitted on, for the
reference period) and ``--name``; later calls with the same file find that
locked model again by the file's content.
"""

from __future__ import annotations

import hashlib
import re
from pathlib import Path

from webapp.analysis.errors import OrdinateError

__all__ = ["add_monitor_commands", "model_code"]

_CODE = re.compile(r"(?:^|/m/)([A-Za-z0-9_-]{16,64})(?:[/?#].*)?$")


def add_monitor_commands(commands, add_data_dir) -> None:
    cmd = commands.add_parser("monitor", help="add new samples to a locked reference model (one upload)")
    cmd.add_argument("model", help="monitoring link (…/m/CODE) or its code, or a model JSON file from "
                                   "`ordinate analyze --model`")
    cmd.add_argument("data", type=Path, help="CSV or TSV file of new samples")
    cmd.add_argument("--order-column", metavar="COLUMN",
                     help="column giving production order: numbers or ISO dates (default: upload order)")
    cmd.add_argument("--uploaded-by", default="", metavar="TEXT",
                     help="who adds the file, as free text (default: empty)")
    cmd.add_argument("--reference", type=Path, metavar="FILE",
                     help="with a model file, the first time only: the data the model was fitted on "
                          "(default: none; needed to lock a model file)")
    cmd.add_argument("--name", help="with a model file, the first time only: the reference model's name "
                                    "(default: the file name)")
    add_data_dir(cmd)
    cmd.set_defaults(run=run_monitor)

    models = commands.add_parser("models", help="list the locked reference models of a data directory")
    models.add_argument("action", choices=("list",), help="list (the only action)")
    add_data_dir(models)
    models.set_defaults(run=run_models)


def model_code(text: str) -> str | None:
    """The code of a monitoring link (``https://host/m/CODE``, ``/m/CODE``) or a bare code, else None."""
    match = _CODE.search(text.strip())
    return match.group(1) if match else None


def run_monitor(args) -> int:
    from webapp.analysis.monitoring import DEFAULT_RUN_LENGTH, run_rule_hits
    from webapp.store.reference_models import ReferenceModelStore

    store = ReferenceModelStore(_data_dir(args))
    locked = _locked_model(store, args)
    info = store.add_upload(locked.code, args.data.read_bytes(), args.data.name,
                            uploaded_by=args.uploaded_by, order_column=args.order_column)
    frame = store.frame(locked.code)
    mine = frame[frame["upload"] == info.upload_id]
    number = len(store.uploads(locked.code))
    print(f"Added “{info.file_name}” to “{locked.name}” version {locked.version} as upload {number}: "
          f"{info.sample_count} sample(s); {int(mine['t2_beyond'].sum())} above the T² limit for new samples, "
          f"{int(mine['q_beyond'].sum())} above the Q limit ({len(frame)} monitored samples in all).")
    positions = set(mine["position"])
    for statistic, median in (("t2", locked.reference.t2_median), ("q", locked.reference.q_median)):
        hits = run_rule_hits(frame[statistic], limit=float(frame[f"{statistic}_limit"].iloc[0]), median=median,
                             run_length=DEFAULT_RUN_LENGTH, statistic=statistic)
        for hit in hits:
            if positions & set(range(hit.first, hit.last + 1)):
                samples = frame["sample"].iloc[hit.first:hit.last + 1]
                print(f"Rule hit ({_rule_words(hit.rule)}, {'T²' if statistic == 't2' else 'Q'}): "
                      f"{', '.join(samples[:6])}{' …' if len(samples) > 6 else ''}")
    print(f"Monitoring page: /m/{locked.code} on the Ordinate server of this data directory.")
    print("These are statistical signals, not release or rejection decisions: follow your validated procedures.")
    return 0


def run_models(args) -> int:
    from webapp.store.reference_models import ReferenceModelStore

    store = ReferenceModelStore(_data_dir(args))
    locked = store.all()
    if not locked:
        print("No locked reference models in this data directory.")
        return 0
    print(f"{'monitoring code':<26} {'version':>7} {'uploads':>7}  name (locked, UTC)")
    for model in locked:
        print(f"{model.code:<26} {model.version:>7} {len(store.uploads(model.code)):>7}  "
              f"{model.name} ({model.locked_at[:16].replace('T', ' ')})")
    return 0


def _rule_words(rule: str) -> str:
    return {"beyond-limit": "beyond the limit", "run-above-median": "run above the reference median"}[rule]


def _data_dir(args) -> Path:
    if not Path(args.data_dir).is_dir():
        raise OrdinateError(f"There is no data directory at {args.data_dir}; give the server's with --data-dir.")
    return Path(args.data_dir)


def _locked_model(store, args):
    path = Path(args.model)
    if path.is_file():
        return _locked_from_file(store, path, args)
    code = model_code(args.model)
    locked = store.get(code) if code else None
    if locked is None:
        raise OrdinateError(f"No locked reference model '{args.model}' in {args.data_dir}. Give its monitoring "
                            "link or code (`ordinate models list` shows them), or a model JSON file.")
    return locked


def _locked_from_file(store, path: Path, args):
    from webapp.analysis.ingest import read_table
    from webapp.analysis.model_io import load_model, model_to_dict, project_table
    from webapp.analysis.monitoring import reference_period

    model = load_model(path)
    canonical = model_to_dict(model)
    for locked in store.all():
        if model_to_dict(locked.model) == canonical:
            return locked
    if args.reference is None:
        raise OrdinateError(f"{path.name} is not locked in this data directory yet. The first time, give the data "
                            "the model was fitted on with --reference (and a --name).")
    data = args.reference.read_bytes()
    table = read_table(data, filename=args.reference.name)
    fitted = project_table(model, table)  # the reference samples through the model's own preprocessing
    period = reference_period(model, fitted.sample_labels, fitted.scores, fitted.t2, fitted.q)
    if len(fitted.sample_labels) != model.n_samples:
        raise OrdinateError(f"{args.reference.name} has {len(fitted.sample_labels)} usable samples, but the model "
                            f"was fitted on {model.n_samples}: give the file the model was fitted on.")
    locked, key = store.lock(model, name=args.name or path.stem, reference=period,
                             data_fingerprint=hashlib.sha256(data).hexdigest(), order_column=args.order_column,
                             label_column=table.id_column)
    print(f"Locked {path.name} as “{locked.name}” version {locked.version}. Manager link, shown only now "
          f"(keep it private: it removes uploads): /m/{locked.code}/manage?key={key}")
    return locked
