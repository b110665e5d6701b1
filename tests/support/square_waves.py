"""Square waves into an RC or a ringing second-order low-pass, for the many-edge tests.

The responses are textbook step responses summed over the edges: the RC's
1 - exp(-t/tau), and that of w0^2 / (s^2 + w0/Q s + w0^2),
1 - exp(-a t) (cos(wd t) + a/wd sin(wd t)), a = w0/(2Q) (Ogata, Modern Control
Engineering, transient-response chapter; from memory).
"""

from __future__ import annotations

import math

import numpy as np

DT, Q = 1e-7, 3.0


def ringing_square_wave(n: int, edges: int, sigma: float, seed: int = 1, out_of_step: bool = False
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """(time, drive, response, f0): a 0/1 V square wave into w0^2 / (s^2 + w0/Q s + w0^2),
    Q = 3, its envelope time constant 2Q/w0 a tenth of the half period. The edges lie
    half way between samples, or (``out_of_step``) at a place inside their sample
    interval drawn evenly at random, as a generator free-running against the scope's
    clock puts them. Step response 1 - exp(-a t) (cos(wd t) + a/wd sin(wd t)),
    a = w0/(2Q) (Ogata, Modern Control Engineering, transient-response chapter; from memory)."""
    half = n // edges
    w0 = 2.0 * Q / (half * DT / 10.0)
    a = w0 / (2.0 * Q)
    wd = w0 * math.sqrt(1.0 - 1.0 / (4.0 * Q * Q))
    rng = np.random.default_rng(seed)
    place = rng.uniform(0.0, 1.0, edges) if out_of_step else np.full(edges, 0.5)
    t = np.arange(n) * DT
    u = np.zeros(n)
    y = np.zeros(n)
    for i in range(edges):
        edge = (half // 2 + i * half - place[i]) * DT
        sign = 1.0 if i % 2 == 0 else -1.0
        x = np.clip(t - edge, 0.0, None)
        s = np.where(x > 0, 1.0 - np.exp(-a * x) * (np.cos(wd * x) + a / wd * np.sin(wd * x)), 0.0)
        y += sign * s
        u += sign * (t >= edge)
    return t, u, y + rng.normal(0.0, sigma, n), w0 / (2.0 * math.pi)


def rc_square_wave(n: int, edges: int, dt: float, half_period_in_tau: float = 10.0, sigma: float = 0.0,
                   seed: int = 1, before_sample: float = 0.5) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """(time s, drive V, response V, tau s): a 0/1 V square wave of ``edges`` edges
    into an RC whose tau is the half period over ``half_period_in_tau``, each
    edge ``before_sample`` of a sample interval before the sample where the
    drive switches (0: on a sample), white noise of ``sigma`` V."""
    half = n // edges
    tau = half * dt / half_period_in_tau
    k = np.arange(n)
    t = k * dt
    drive = (((k + half // 2) // half) % 2 == 1).astype(float)
    y = np.zeros(n)
    for i in range(edges):
        x = np.clip(t - (half // 2 + i * half - before_sample) * dt, 0.0, None)
        y += (1.0 if i % 2 == 0 else -1.0) * -np.expm1(-x / tau)
    if sigma:
        y = y + np.random.default_rng(seed).normal(0.0, sigma, n)
    return t, drive, y, tau
