"""Hand-made reference for CR2 cluster-robust standard errors, with the derivation.

Source: the CR2 adjustment of Pustejovsky & Tipton (2018, J Bus Econ Stat 36:672-683,
section 2), ``A_j = D_jᵀ B_j^{-1/2} D_j`` with ``D_jᵀ D_j = Φ_j`` and
``B_j = D_j [(I − H) Φ (I − H)ᵀ]_jj D_jᵀ``, and the Satterthwaite degrees of freedom of
Tipton (2015, Psychological Methods 20:375-393). The example is small enough to follow
with a pencil: an intercept-only model with a fixed tau² = 0, so ``Φ = diag(v)``,
``W = Φ⁻¹`` and ``M = (XᵀWX)⁻¹ = 1 / Σ w``, two clusters of two rows each.

Steps (plain arithmetic; 2 × 2 symmetric square roots by the closed form
``√B = (B + s I) / t`` with ``s = √det B`` and ``t = √(tr B + 2 s)``, from memory):

- w = (1, 1/4, 1/2, 2), Σ w = 3.75, M = 1/3.75 = 0.266667;
- b = Σ w y / Σ w = (0 + 0.25 + 1.5 + 4) / 3.75 = 5.75 / 3.75 = 1.533333;
- e = y − b = (−1.533333, −0.533333, 1.466667, 0.466667);
- cluster j = rows (i, i'): ``D_j = diag(√v_i, √v_i')`` (the Cholesky factor of a
  diagonal Φ_j); the block of ``(I − H) Φ (I − H)ᵀ`` is ``Φ_j − M 11ᵀ``;
  ``B_j = D_j (Φ_j − M 11ᵀ) D_j``; ``A_j = D_j B_j^{-1/2} D_j``;
- ``V = M² Σ_j (1ᵀ W_j A_j e_j)²``, SE = √V;
- ``g_j = A_jᵀ W_j 1 M``; with ``Ω = Φ − M 11ᵀ`` (k × k),
  ``ν = 2 (Σ_j g_jᵀ Ω_jj g_j)² / (2 Σ_i Σ_j (g_iᵀ Ω_ij g_j)²)``.

For comparison, the whitened variant ``A_j = Φ_j^{1/2} (I − Φ_j^{−1/2} X_j M X_jᵀ Φ_j^{−1/2})^{−1/2}
Φ_j^{−1/2}`` (envlink 0.1.0) gives SE 0.942809 and ν = 1.000000 on the same data:
the two agree only where the variances within each cluster are equal.
"""

from __future__ import annotations

CR2_HAND = {
    "y": [0.0, 1.0, 3.0, 2.0],
    "v": [1.0, 4.0, 2.0, 0.5],
    "cluster": ["a", "a", "b", "b"],
    "estimate": 23.0 / 15.0,  # 5.75 / 3.75
    "se": 0.9601724834945119,
    "df": 1.0070391549927529,
    "se_whitened_variant": 0.9428090415820632,  # = sqrt(8) / 3
}
