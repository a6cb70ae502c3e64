"""Response to selection: breeder's equation, multivariate response and projections."""

from __future__ import annotations

import math

import numpy as np

__all__ = ["breeders_response", "response_se", "genetic_covariance", "multivariate_response", "project_mean",
           "generations_needed"]


def breeders_response(h2: float, S: float) -> float:
    """R = h^2 S: the expected change of the mean in one generation (breeder's equation).

    Parameters: ``h2`` and ``S``. Returns R. Source: Lush 1937 (Animal Breeding Plans); Falconer & Mackay
    1996, Introduction to Quantitative Genetics, 4th ed., ch. 11.
    """
    return h2 * S


def response_se(h2: float, h2_se: float | None, S: float, S_se: float) -> float:
    """Delta-method standard error of R = h^2 S, treating h^2 and S as independent (h^2 exact if its se is unknown).

    Parameters: h^2, its se (or None), S and its se. Returns the se. Source: the delta method, Lynch & Walsh
    1998 (Genetics and Analysis of Quantitative Traits, appendix 1).
    """
    var = (h2 * S_se) ** 2 + ((h2_se or 0.0) * S) ** 2
    return math.sqrt(var)


def genetic_covariance(P: np.ndarray, h2: np.ndarray, rg: np.ndarray | None = None) -> np.ndarray:
    """G with G_jj = h^2_j P_jj and G_jk = r_g,jk sqrt(G_jj G_kk).

    ``rg`` defaults to the phenotypic correlations of P (the caller must say so).

    Parameters: phenotypic covariance ``P``, heritabilities ``h2`` and genetic correlations ``rg``. Returns G.
    Source: Lynch & Walsh 1998 (Genetics and Analysis of Quantitative Traits).
    """
    P = np.atleast_2d(P)
    sd = np.sqrt(np.diag(P))
    if rg is None:
        rg = P / np.outer(sd, sd)
    g_sd = np.sqrt(np.asarray(h2) * np.diag(P))
    G = rg * np.outer(g_sd, g_sd)
    np.fill_diagonal(G, g_sd**2)
    return G


def multivariate_response(G: np.ndarray, beta_raw: np.ndarray) -> np.ndarray:
    """Delta z-bar = G beta (Lande 1979), beta in trait units (gradient_raw).

    Parameters: ``G`` and ``beta_raw``. Returns Delta z-bar. Source: Lande 1979 (Evolution 33:402-416).
    """
    return np.atleast_2d(G) @ np.asarray(beta_raw)


def project_mean(mean0: float, response: float, generations: int) -> np.ndarray:
    """Trait mean after 0, 1, ..., ``generations`` generations of constant selection and heritability.

    Parameters: the mean now, the response per generation and the generations. Returns the projected means.
    Source: the breeder's equation repeated, Falconer & Mackay 1996, Introduction to Quantitative Genetics,
    4th ed., ch. 11 (assumes h^2 and S stay constant).
    """
    return mean0 + response * np.arange(generations + 1)


def generations_needed(target_change: float, response: float) -> int | None:
    """Generations of constant response needed to change the mean by ``target_change``.

    None when the response is zero or goes the other way (never reached).

    Parameters: the change wanted and the response per generation. Source: the breeder's equation repeated,
    Falconer & Mackay 1996, Introduction to Quantitative Genetics, 4th ed., ch. 11.
    """
    if target_change == 0:
        return 0
    if response == 0 or np.sign(response) != np.sign(target_change):
        return None
    return math.ceil(target_change / response - 1e-12)
