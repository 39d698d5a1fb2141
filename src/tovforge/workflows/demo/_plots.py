"""The demo's figures: a corner-style posterior plot and the mass-radius / Lambda bands.

Drawn with matplotlib's Agg backend (no display); written by hand, not with a
corner-plot package.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from ..._extras import pyplot

__all__ = ["axis_label", "corner_plot", "band_plot", "trace_plot", "credible_levels"]


def _pyplot():
    return pyplot("the demo's figures")


def credible_levels(hist: np.ndarray, fractions=(0.68, 0.95)) -> list[float]:
    """Density thresholds whose super-level sets hold the given fractions of a 2-D histogram.

    Parameters
    ----------
    hist : ndarray
        Counts or densities on equal-area cells.
    fractions : sequence of float
        Probability mass to enclose, each in (0, 1).

    Returns
    -------
    list of float
        One threshold per fraction (the smallest cell value still inside).
    """
    flat = np.sort(hist.ravel())[::-1]
    cum = np.cumsum(flat)
    total = cum[-1]
    return [float(flat[min(np.searchsorted(cum, f * total), flat.size - 1)]) for f in fractions]


def axis_label(name: str, unit: str | None) -> str:
    """An axis label with its unit: ``log_p1 [log10(dyn/cm^2)]``; dimensionless ones say so."""
    if unit is None:
        return name
    return f"{name} (dimensionless)" if unit in ("", "1") else f"{name} [{unit}]"


def corner_plot(path, samples, names, bounds, marker=None, title="", units=None) -> Path:
    """Histograms of each parameter and 68 / 95 % regions of each pair.

    Parameters
    ----------
    path : path-like
        PNG to write.
    samples : ndarray, shape (n, d)
    names : sequence of str
        Axis labels.
    bounds : array_like, shape (d, 2)
        Axis ranges (the prior box).
    marker : array_like, shape (d,), optional
        A point to mark (the EOS the data were made around).
    title : str
    units : sequence of str, optional
        Unit of each parameter, shown on the axes.
    """
    from scipy.ndimage import gaussian_filter

    plt = _pyplot()
    samples = np.asarray(samples, float)
    b = np.asarray(bounds, float)
    d = samples.shape[1]
    labels = [axis_label(n, None if units is None else units[k]) for k, n in enumerate(names)]
    bins = 30
    fig, axes = plt.subplots(d, d, figsize=(2.3 * d, 2.3 * d), squeeze=False)
    for i in range(d):
        for j in range(d):
            ax = axes[i, j]
            if j > i:
                ax.axis("off")
                continue
            if i == j:
                ax.hist(samples[:, i], bins=bins, range=tuple(b[i]), color="tab:blue", histtype="stepfilled",
                        alpha=0.6)
                lo, med, hi = np.quantile(samples[:, i], [0.05, 0.5, 0.95])
                for v in (lo, hi):
                    ax.axvline(v, color="k", ls=":", lw=0.8)
                ax.axvline(med, color="k", lw=1.0)
                ax.set_title(f"{names[i]} = {med:.3g} [{lo:.3g}, {hi:.3g}]", fontsize=8)
                ax.set_yticks([])
                if marker is not None:
                    ax.axvline(marker[i], color="tab:red", lw=1.2)
            else:
                h, xe, ye = np.histogram2d(samples[:, j], samples[:, i], bins=bins, range=[b[j], b[i]])
                ax.imshow(h.T, origin="lower", extent=(xe[0], xe[-1], ye[0], ye[-1]), aspect="auto",
                          cmap="Blues")
                # contours of the histogram smoothed like a Gaussian kernel density estimate with Scott's
                # bandwidth, sigma * n^(-1/6) per axis in two dimensions (Scott 1992, Multivariate Density
                # Estimation, eq. 6.42): raw counts of a few thousand samples draw islands around every noisy
                # bin, most on the flat (prior-dominated) panels (issue 16); at least one bin
                scott = samples.shape[0] ** (-1.0 / 6.0)
                width = [np.std(samples[:, k]) * scott / ((b[k, 1] - b[k, 0]) / bins) for k in (j, i)]
                hs = gaussian_filter(h, [max(1.0, w) for w in width], mode="nearest")
                levels = sorted(v for v in set(credible_levels(hs)) if v > 0)
                if levels:
                    xc, yc = 0.5 * (xe[1:] + xe[:-1]), 0.5 * (ye[1:] + ye[:-1])
                    ax.contour(xc, yc, hs.T, levels=levels, colors="k", linewidths=0.8)
                if marker is not None:
                    ax.plot(marker[j], marker[i], "x", color="tab:red", ms=7, mew=1.5)
                ax.set_xlim(b[j])
                ax.set_ylim(b[i])
            if i == d - 1:
                ax.set_xlabel(labels[j], fontsize=8)
            else:
                ax.set_xticklabels([])
            if j == 0 and i > 0:
                ax.set_ylabel(labels[i], fontsize=8)
            elif i != j:
                ax.set_yticklabels([])
    fig.suptitle(title + "\nlines: median and 90 % interval; contours: 68 % and 95 %"
                 + ("; red: the EOS the data were made around" if marker is not None else ""), fontsize=9)
    fig.tight_layout()
    fig.savefig(path, dpi=110)
    plt.close(fig)
    return Path(path)


def _ellipse(mean_x, mean_y, sx, sy, rho, k, n=120):
    """Points of the k-sigma ellipse of a 2-D Gaussian (Mahalanobis distance k)."""
    cov = np.array([[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]])
    vals, vecs = np.linalg.eigh(cov)
    t = np.linspace(0.0, 2.0 * np.pi, n)
    circle = np.stack([np.cos(t), np.sin(t)])
    pts = vecs @ (np.sqrt(vals)[:, None] * circle) * k
    return mean_x + pts[0], mean_y + pts[1]


def band_plot(path, band: dict, exact: dict | None, observations, generator_curve=None, title="") -> Path:
    """M-R band (left) and Lambda(M) band (right) with the observations drawn.

    Parameters
    ----------
    path : path-like
    band : dict
        ``mass`` (q,), ``fraction`` (q,) and ``radius_median``, ``radius_p05``,
        ``radius_p95``, ``lambda_median``, ``lambda_p05``, ``lambda_p95`` (q,):
        the emulated band over the posterior samples.
    exact : dict, optional
        ``mass``, ``median``, ``p05``, ``p95`` of R(M) re-solved exactly for a
        subset of the samples, ``n`` (samples re-solved), and optionally
        ``emulated_median``, ``emulated_p05``, ``emulated_p95``: the emulated
        band over the same samples (drawn beside the exact one, so that the two
        bands compared rest on one sample set).
    observations : Observations
    generator_curve : tuple of ndarray, optional
        ``(mass, radius, lambda)`` of the EOS the data were made around.
    """
    plt = _pyplot()
    m = np.asarray(band["mass"], float)
    fraction = np.asarray(band["fraction"], float)
    show = fraction >= 0.05  # above that the band rests on too few samples
    fig, (ax, bx) = plt.subplots(1, 2, figsize=(11.5, 6.8))
    ax.fill_betweenx(m[show], band["radius_p05"][show], band["radius_p95"][show], color="tab:blue", alpha=0.3,
                     lw=0, label="emulated 90 % band, all samples")
    ax.plot(band["radius_median"][show], m[show], color="tab:blue", lw=2, label="emulated median, all samples")
    if exact is not None:
        em = np.asarray(exact["mass"], float)
        n = exact["n"]
        for k, ls in (("median", "-"), ("p05", "--"), ("p95", "--")):
            ax.plot(exact[k], em, color="k", lw=1, ls=ls,
                    label={"median": f"exact median, {n} re-solved samples",
                           "p05": f"exact 90 % band, the same {n} samples"}.get(k))
            if f"emulated_{k}" in exact:
                ax.plot(exact[f"emulated_{k}"], em, color="tab:cyan", lw=1, ls=":",
                        label=f"emulated median and 90 % band, the same {n} samples" if k == "median" else None)
    thin = np.flatnonzero(show & (fraction < 0.5))
    if thin.size:  # where the band is conditioned on the samples that reach the mass (issue 16)
        m_thin = float(m[thin[0]])
        ax.axhline(m_thin, color="grey", lw=0.8, ls="-.",
                   label=f"above {m_thin:.2f} Msun: fewer than half of the samples reach M (band over those)")
    # no blue (the band) and no red (the generating EOS)
    colours = ["tab:orange", "tab:green", "tab:purple", "tab:brown", "tab:pink", "tab:olive", "tab:cyan"]
    m_lo, m_hi = float(m[show].min()) - 0.05, float(m[show].max()) + 0.05
    for c, p in zip(colours * 3, observations.pulsars):
        for k, alpha in ((1.0, 0.9), (2.0, 0.5)):
            x, y = _ellipse(p.radius_km, p.mass_msun, p.radius_sigma_km, p.mass_sigma_msun, p.correlation, k)
            ax.plot(x, y, color=c, lw=1.3, alpha=alpha, label=f"{p.name} (1 and 2 sigma)" if k == 1.0 else None)
    if generator_curve is not None:
        gm, gr, _ = generator_curve
        keep = gm >= m_lo
        ax.plot(gr[keep], gm[keep], color="tab:red", lw=1, ls=":", label="EOS the data were made around")
    ax.set_ylim(m_lo, m_hi)
    ax.set(xlabel="R [km]", ylabel="M [Msun]", title="mass-radius: posterior band and the pulsars")
    # legends below the panels: inside they would cover the band or the measurements
    ax.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=1, frameon=False)

    bx.fill_between(m[show], band["lambda_p05"][show], band["lambda_p95"][show], color="tab:blue", alpha=0.3, lw=0,
                    label="emulated 90 % band of Lambda(M), all samples")
    bx.plot(m[show], band["lambda_median"][show], color="tab:blue", lw=2, label="emulated median, all samples")
    if thin.size:
        bx.axvline(m_thin, color="grey", lw=0.8, ls="-.", label=f"above {m_thin:.2f} Msun: fewer than half reach M")
    for c, mg in zip((colours * 3)[len(observations.pulsars):], observations.mergers):
        # for q = 1 both stars have the same Lambda and Lambda-tilde equals it
        m_eq = mg.chirp_mass_msun * 2.0**0.2
        bx.errorbar([m_eq], [mg.lambda_tilde], yerr=[mg.lambda_tilde_sigma], fmt="o", color=c, capsize=4,
                    label=f"{mg.name}: Lambda-tilde +- 1 sigma at the equal-mass M")
    if generator_curve is not None:
        gm, _, gl = generator_curve
        keep = gm >= m_lo
        bx.plot(gm[keep], gl[keep], color="tab:red", lw=1, ls=":", label="EOS the data were made around")
    bx.set_xlim(m_lo, m_hi)
    bx.set_yscale("log")
    bx.set(xlabel="M [Msun]", ylabel="Lambda (dimensionless)", title="tidal deformability")
    bx.legend(fontsize=7, loc="upper center", bbox_to_anchor=(0.5, -0.12), ncol=1, frameon=False)
    if title:
        fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    fig.savefig(path, dpi=110, bbox_inches="tight")  # the legends below the panels are part of the figure
    plt.close(fig)
    return Path(path)


def trace_plot(path, chain, names, n_burn) -> Path:
    """Every walker's trace per parameter, burn-in shaded.

    Parameters
    ----------
    chain : ndarray, shape (n_steps, n_walkers, d)
    """
    plt = _pyplot()
    d = chain.shape[2]
    fig, axes = plt.subplots(d, 1, figsize=(8, 1.6 * d), sharex=True, squeeze=False)
    for i in range(d):
        ax = axes[i, 0]
        ax.plot(chain[:, :, i], color="k", alpha=0.15, lw=0.5)
        ax.axvspan(0, n_burn, color="0.85", lw=0)
        ax.set_ylabel(names[i])
    axes[-1, 0].set_xlabel("step (grey: burn-in, discarded)")
    fig.tight_layout()
    fig.savefig(path, dpi=100)
    plt.close(fig)
    return Path(path)
