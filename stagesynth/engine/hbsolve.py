"""Harmonic balance drives: Newton with source stepping, and the search for the EMF that
gives a required fundamental at the load (bordered Newton, secant fallback).

Works on harmonic.LargeSignal models (duck-typed: newton, subset, start, load_phasors,
linear_gain).
"""

from __future__ import annotations

import numpy as np


def _stepped(model, red, lin, x, emf, h, todo=None):
    """Newton at `emf` for members `todo` (default all); members that fail are
    source-stepped from the operating point, and a member failing a step is dropped
    (it stays not converged) rather than pursued further."""
    b = model.B
    todo = np.arange(b) if todo is None else np.asarray(todo, dtype=int)
    x1 = x.copy()
    conv = np.zeros(b, dtype=bool)
    if todo.size == 0:
        return x1, conv
    sub = model if todo.size == b else model.subset(todo)
    red_t = red if todo.size == b else {k: v[todo] for k, v in red.items()}
    xt, ok, _ = sub.newton(red_t, lin[todo], x[todo], emf[todo], h)
    x1[todo], conv[todo] = xt, ok
    bad = todo[~ok]
    if bad.size == 0:
        return x1, conv
    alive = bad
    xs = model.subset(bad).start(h)
    for frac in (0.25, 0.5, 0.75, 1.0):
        sub = model.subset(alive)
        red_s = {k: v[alive] for k, v in red.items()}
        xs, ok, _ = sub.newton(red_s, lin[alive], xs, emf[alive] * frac, h, max_iter=60)
        alive, xs = alive[ok], xs[ok]
        if alive.size == 0:
            break
    x1[alive] = xs
    conv[alive] = True
    return x1, conv


def _secant(model, red, lin, x, target, h):
    """EMF amplitudes giving fundamental `target` (peak) at the load: secant on |V1|."""
    g0, per_volt = model.linear_gain(red, h)
    e = target / np.maximum(g0, 1e-30)
    # first the bordered Newton (drive and waveform together) from the linear response at
    # that drive (at zero drive the level equation has no gradient); the secant with
    # source stepping takes over for members where that fails
    start = x + per_volt * e[:, None, None] if np.allclose(x[..., 1:], 0.0) else x
    xb, okb, eb = model.newton(red, lin, start, e, h, max_iter=40, target=target)
    if np.all(okb):
        return eb, xb, okb
    bad = np.flatnonzero(~okb)
    sub = model.subset(bad)
    red_s = {k: v[bad] for k, v in red.items()}
    e_s, x_s, ok_s = _secant_plain(sub, red_s, lin[bad], x[bad], target[bad], h, e[bad])
    eb[bad], xb[bad], okb[bad] = e_s, x_s, ok_s
    return eb, xb, okb


def _secant_plain(model, red, lin, x, target, h, e):
    """The fallback: Newton with source stepping at fixed drives, secant on the drive.
    A member whose solve fails is left not converged (never retried)."""
    x, conv = _stepped(model, red, lin, x, e, h)
    a = np.abs(model.load_phasors(red, x, e)[:, 1])
    e_prev, a_prev = np.zeros_like(e), np.zeros_like(a)
    for _ in range(12):
        err = a / np.maximum(target, 1e-300) - 1.0
        todo = np.flatnonzero((np.abs(err) >= 1e-7) & conv)
        if todo.size == 0:
            break
        slope = np.where(np.abs(a - a_prev) > 0, (e - e_prev) / np.where(
            a - a_prev != 0, a - a_prev, 1.0), e / np.maximum(a, 1e-300))
        e_new = np.clip(e + (target - a) * slope, 0.5 * e, 2.0 * e)
        e_prev, a_prev = e.copy(), a.copy()
        e[todo] = e_new[todo]
        x_new, ok = _stepped(model, red, lin, x, e, h, todo)
        x[todo] = x_new[todo]
        conv[todo] = ok[todo]
        a = np.abs(model.load_phasors(red, x, e)[:, 1])
    err = a / np.maximum(target, 1e-300) - 1.0
    return e, x, conv & (np.abs(err) < 1e-5)
