"""An assessment with its pictures in one call, so that a process of its own can make them.

The window works out how good the model shown is in a separate process
(:class:`twofold.gui.session.Session`): the assessment's Python work and the
drawing then never compete with the window's thread for the interpreter
lock, which on a two-core machine was the cause of the window's stalls.  The
process receives the read-only fit and returns the core
:class:`~twofold.core.assessing.assessment.Assessment` with its figures
(their pixels, :class:`~twofold.render.figures.Raster`, for the window).
Nothing here imports Qt.
"""

from __future__ import annotations

from twofold.render import figures as shared


def assessment_figures(result, raw: bool = False) -> dict:
    """PNG bytes of the ROC curve, the calibration plot and the influence plot of a core Assessment (with
    ``raw``, their pixels as :class:`~twofold.render.figures.Raster`).

    Keys ``roc`` and ``calibration``, and ``influence`` when influence was computed.
    """
    out = curve_figures(result.roc, float(result.auc.auc), result.groups, result.smooth, raw=raw)
    if result.influence is not None:
        out["influence"] = shared.influence_figure(result.influence.cooks_distance, result.rows, raw=raw)
    return out


def pooled_figures(curves, raw: bool = False) -> dict:
    """PNG bytes (or with ``raw`` pixels) of the ROC curve and calibration plot of a pooled fit's pooled predictions
    (:func:`twofold.core.models.pooling.pooled_curves`), each labelled as such; keys ``roc`` and ``calibration``."""
    from twofold.core.models.pooling import POOLED_LABEL

    return curve_figures(curves.roc, curves.auc, curves.groups, curves.smooth, label=POOLED_LABEL, raw=raw)


def curve_figures(roc, auc: float, groups, smooth, label: str | None = None, raw: bool = False) -> dict:
    """PNG bytes (or with ``raw`` pixels) of an ROC curve and a calibration plot (risk groups, smoothed curve),
    keys ``roc``, ``calibration``."""
    out = {"roc": shared.roc_figure(roc.fpr, roc.tpr, auc, label=label, raw=raw)}
    cal = {}
    if groups is not None and len(groups.n):
        cal = {"mean_predicted": groups.mean_predicted, "observed": groups.observed,
               "ci_low": groups.ci_low, "ci_high": groups.ci_high}
    if smooth is not None:
        cal.update(smooth_predicted=smooth.predicted, smooth_observed=smooth.observed,
                   smooth_unsteady=bool(smooth.unreliable))
    out["calibration"] = shared.calibration_figure(**cal, label=label, raw=raw)
    return out


#: Set in an assessment process: a shared number; work on a ticket below it is no longer wanted.
_WANTED_FROM = None


class Abandoned(Exception):
    """An assessment given up because a newer one was asked for."""


def assess_and_draw(fit, threshold=None, ticket=None):
    """``(Assessment, figures)`` of a read-only fit: everything the window's assessment section shows, the
    figures as pixels (:class:`~twofold.render.figures.Raster`).

    In an assessment process, work on ``ticket`` stops between its steps
    (raising :class:`Abandoned`) once a newer ticket is wanted.
    """
    from twofold.core.workspace import assess_fit

    def checkpoint():
        if ticket is not None and _WANTED_FROM is not None and _WANTED_FROM.value > ticket:
            raise Abandoned

    result = assess_fit(None, fit, threshold=threshold, checkpoint=checkpoint)
    checkpoint()
    return result, assessment_figures(result, raw=True)


#: Arrays at least this large (bytes) go to the assessment process through shared memory, not the pipe.
SHARED_FROM = 1 << 20


def pack(obj, take: bool = False) -> tuple:
    """``(bytes, blocks)``: ``obj`` pickled with its large arrays placed in shared memory.

    Pickling a fit of 200,000 rows copies about 40 MB while holding the
    interpreter lock (about 50 ms, and five times that at a million rows), so
    the window could not answer meanwhile; a copy into shared memory is made
    by numpy without the lock.  The caller keeps ``blocks`` until the work is
    done or withdrawn, then gives them to :func:`release`.  With ``take``,
    whoever unpickles the bytes frees each block once its array is copied out
    (the assessment's answer to the window: :func:`assess_and_draw_packed`).
    """
    import io
    import pickle
    from multiprocessing import shared_memory

    import numpy as np

    blocks = []

    class Packer(pickle.Pickler):
        def reducer_override(self, o):
            if type(o) is not np.ndarray or o.nbytes < SHARED_FROM or o.dtype.hasobject:
                return NotImplemented
            order = "F" if o.flags.f_contiguous and not o.flags.c_contiguous else "C"
            block = shared_memory.SharedMemory(create=True, size=o.nbytes)
            blocks.append(block)
            np.copyto(np.ndarray(o.shape, o.dtype, buffer=block.buf, order=order), o)
            return _unpack_array, (block.name, o.shape, o.dtype.str, order, take)

    out = io.BytesIO()
    try:
        Packer(out, protocol=pickle.HIGHEST_PROTOCOL).dump(obj)
    except BaseException:
        release(blocks)
        raise
    return out.getvalue(), blocks


def release(blocks) -> None:
    """Free the shared memory of :func:`pack` (in the window's process, once the work is over)."""
    for block in blocks:
        try:
            block.close()
            block.unlink()
        except (OSError, BufferError):
            pass


def _unpack_array(name, shape, dtype, order, take=False):
    """An array of :func:`pack`, copied out of its shared memory (freed then, with ``take``)."""
    from multiprocessing import shared_memory

    import numpy as np

    block = shared_memory.SharedMemory(name=name)
    try:
        return np.ndarray(shape, np.dtype(dtype), buffer=block.buf, order=order).copy(order="K")
    finally:
        block.close()
        if take:
            block.unlink()


def assess_and_draw_packed(packed: bytes, threshold=None, ticket=None):
    """:func:`assess_and_draw` of a fit sent by :func:`pack`, answered the same way: ``(bytes, names)``.

    The answer's large arrays (per-record influence, the ROC curve's points:
    about 50 MB at a million rows) wait in shared memory, so that receiving
    them never holds the window's interpreter lock for long;
    :func:`unpack_answer` reads them and frees their memory, :func:`discard`
    frees the memory of an answer no longer wanted.
    """
    import pickle

    answer = assess_and_draw(pickle.loads(packed), threshold, ticket)
    data, blocks = pack(answer, take=True)
    for block in blocks:
        block.close()  # closed here, freed by whoever reads them
    return data, [block.name for block in blocks]


def unpack_answer(answer):
    """In the window's process: ``(Assessment, figures)`` from :func:`assess_and_draw_packed`, its memory freed."""
    import pickle

    data, names = answer
    try:
        return pickle.loads(data)
    finally:
        discard(names)  # any block a failed read left behind


def discard(names) -> None:
    """Free the shared memory of an answer (blocks already read and freed are passed over)."""
    from multiprocessing import shared_memory

    for name in names:
        try:
            block = shared_memory.SharedMemory(name=name)
        except (FileNotFoundError, OSError):
            continue
        try:
            block.close()
            block.unlink()
        except (FileNotFoundError, OSError):
            pass


def start_quietly(wanted_from=None) -> None:
    """At the start of an assessment process: yield to the window (a lower priority, one linear-algebra thread), keep
    the shared ticket, load the libraries."""
    import os

    global _WANTED_FROM
    _WANTED_FROM = wanted_from
    _leave_with_parent()
    try:
        os.nice(5)
    except (AttributeError, OSError):
        pass
    # One linear-algebra thread: a second one took the window's core whenever the assessment's products ran.
    from twofold.core.models.fit import keep_one_blas_thread

    keep_one_blas_thread()
    import twofold.core.workspace  # noqa: F401

    shared.png_bytes(shared.new_figure())
    from twofold.core.models.fit import settle_collector

    settle_collector()


def _leave_with_parent() -> None:
    """End this process as soon as the window's process is gone (however it ended: closed, killed, crashed)."""
    import multiprocessing
    import os
    import threading
    import time

    parent = multiprocessing.parent_process()
    if parent is None:
        return

    def watch():
        import signal

        while parent.is_alive():
            time.sleep(0.5)
        os.kill(os.getpid(), signal.SIGTERM)  # at once: nothing of this process is worth finishing

    threading.Thread(target=watch, name="twofold-parent-watch", daemon=True).start()
