"""Checks of the sparse factorisation (ped2g.fit.sparse_factor) and of the sparse mixed-model-equation
likelihood (ped2g.fit.sparse_mme), docs/methods.md §2.14.

Oracles: numpy's dense ``slogdet``, ``solve`` and ``inv`` [C]; scipy.stats.multivariate_normal on
the observed cells with the covariance V built densely from the model's definition (§2.1) [C];
central finite differences (exact identity up to O(h^2)) [C]; Mrode (2014) p. 74 solutions of the
calf example [V: Mrode, via tests/fit/mrode.py and docs/methods.md §2.10].
"""

import numpy as np
import pytest
import scipy.sparse as sp
from scipy import stats

from ped2g.fit import sparse_factor as sf
from ped2g.fit import sparse_mme as sm
from ped2g.pedigree.core import Pedigree
from ped2g.pedigree.relationships import inbreeding, relationship_matrix


def random_spd(n, density, seed):
    M = sp.random(n, n, density=density, random_state=seed)
    M = M + M.T
    return (M + sp.diags(np.abs(M).sum(axis=1).A1 + 0.1)).tocsc()


def check_factor(M, atol=1e-10):
    """Factor the (already permuted) symmetric ``M``; compare with dense numpy [C]."""
    Cp, Ci, Cx = sf.upper_csc(M)
    f = sf.Factor(Cp, Ci)
    assert f.factor(Cx)
    dense = M.toarray()
    sign, want = np.linalg.slogdet(dense)
    assert sign == 1.0
    assert f.log_det() == pytest.approx(want, rel=1e-12, abs=1e-10)
    b = np.random.default_rng(0).normal(size=M.shape[0])
    np.testing.assert_allclose(f.solve(b), np.linalg.solve(dense, b), rtol=0, atol=atol * np.abs(b).max() * 1e2)
    Zx, Zd = f.selected_inverse()
    inv = np.linalg.inv(dense)
    Z = f.lower_matrix(Zx, Zd).tocoo()
    np.testing.assert_allclose(Z.data, inv[Z.row, Z.col], rtol=0, atol=atol * np.abs(inv).max())
    # the selected inverse covers every entry of the matrix's own pattern
    lower = sp.tril(M).tocoo()
    on_l = set(zip(Z.row.tolist(), Z.col.tolist()))
    assert all((i, j) in on_l for i, j in zip(lower.row.tolist(), lower.col.tolist()))
    return f


@pytest.mark.parametrize("n,density,seed", [(1, 1.0, 0), (40, 0.08, 1), (120, 0.02, 2), (200, 0.01, 3)])
def test_factor_solve_and_selected_inverse_equal_dense(n, density, seed):
    M = random_spd(n, density, seed)
    perm = sf.fill_reducing_order(M)
    assert sorted(perm.tolist()) == list(range(n))
    check_factor(M.tocsr()[perm][:, perm])


def test_ordering_reduces_fill_on_an_arrow_matrix():
    # An arrow matrix (dense first row and column) fills L completely in the natural order and not
    # at all once the dense node is eliminated last [C: elementary].
    n = 50
    M = sp.lil_matrix((n, n))
    M[0, :] = 1.0
    M[:, 0] = 1.0
    M.setdiag(n + 1.0)
    M = M.tocsc()
    natural = sf.Factor(*sf.upper_csc(M)[:2])
    perm = sf.fill_reducing_order(M)
    ordered = sf.Factor(*sf.upper_csc(M.tocsr()[perm][:, perm])[:2])
    assert natural.nnz == n * (n + 1) // 2
    assert ordered.nnz == 2 * n - 1


def test_ordering_matches_superlu_fill_on_a_random_pattern():
    # The fill of our factor in the returned order equals the non-zeros of SuperLU's own L for the
    # same ordering, with no pivoting (scipy as reference) [C], and is below the natural order's.
    import scipy.sparse.linalg as spla

    M = random_spd(300, 0.01, 5)
    perm = sf.fill_reducing_order(M)
    ordered = sf.Factor(*sf.upper_csc(M.tocsr()[perm][:, perm])[:2])
    natural = sf.Factor(*sf.upper_csc(M)[:2])
    lu = spla.splu(M, permc_spec="MMD_AT_PLUS_A", diag_pivot_thresh=0.0, options={"SymmetricMode": True})
    assert ordered.nnz == lu.L.nnz
    assert ordered.nnz < natural.nnz


def test_not_positive_definite_is_reported():
    M = sp.csc_matrix(np.array([[1.0, 2.0], [2.0, 1.0]]))
    Cp, Ci, Cx = sf.upper_csc(M)
    assert not sf.Factor(Cp, Ci).factor(Cx)



def random_block_spd(n_blocks, t, density, seed):
    """A symmetric positive definite matrix made of dense t x t blocks on a random block pattern
    (diagonally dominant, so positive definite by Gershgorin's theorem [C]), unknowns of a block
    kept together and the blocks in a minimum-degree order of the block graph (as the mixed-model
    equations are laid out)."""
    rng = np.random.default_rng(seed)
    B = sp.random(n_blocks, n_blocks, density=density, random_state=seed)
    B = ((B + B.T + sp.eye(n_blocks)) != 0).astype(float)
    order = sf.fill_reducing_order(B)
    B = B.tocsr()[order][:, order].tocoo()
    vals = rng.normal(size=(B.nnz, t, t))
    rows = (B.row[:, None, None] * t + np.arange(t)[None, :, None] + 0 * vals).ravel()
    cols = (B.col[:, None, None] * t + np.arange(t)[None, None, :] + 0 * vals).ravel()
    M = sp.csc_matrix((vals.ravel(), (rows.astype(int), cols.astype(int))), shape=(n_blocks * t,) * 2)
    M = M + M.T
    return (M + sp.diags(np.abs(M).sum(axis=1).A1 + 0.1)).tocsc()


def scalar_factor(M):
    """Scalar up-looking LDL' and scalar selected inverse of the (permuted) M."""
    Cp, Ci, Cx = sf.upper_csc(M)
    parent, Lp, Li = sf.symbolic(Cp, Ci)
    Lx, D = np.empty(len(Li)), np.empty(len(Cp) - 1)
    assert sf.ldl_numeric(Cp, Ci, Cx, parent, Lp, Li, Lx, D) == len(D)
    Zx, Zd = np.empty(len(Li)), np.empty(len(D))
    sf.selected_inverse(Lp, Li, Lx, D, Zx, Zd)
    return Lx, D, Zx, Zd


@pytest.mark.parametrize("n_blocks,t,density,seed", [(60, 4, 0.05, 1), (150, 3, 0.02, 2), (40, 1, 0.1, 3),
                                                     (25, 4, 0.5, 4)])
def test_supernodal_factor_equals_scalar_and_dense_on_block_matrices(n_blocks, t, density, seed):
    # Supernodal kernels against the scalar ones (same L, D, Z on the same pattern) and both
    # against numpy's dense inverse [C].
    M = random_block_spd(n_blocks, t, density, seed)
    f = check_factor(M)
    widths = np.diff(f.snode)
    assert widths.sum() == M.shape[0] and widths.min() >= 1
    if t > 1:
        assert widths.max() > t             # some supernodes span more than one block
    Lx, D, Zx, Zd = scalar_factor(M)
    np.testing.assert_allclose(f.D, D, rtol=1e-10, atol=0)
    np.testing.assert_allclose(f.Lx, Lx, rtol=0, atol=1e-10 * np.abs(Lx).max())
    Zx2, Zd2 = f.selected_inverse()
    np.testing.assert_allclose(Zd2, Zd, rtol=1e-10, atol=0)
    np.testing.assert_allclose(Zx2, Zx, rtol=0, atol=1e-10 * np.abs(Zd).max())
    inv = np.linalg.inv(M.toarray())
    np.testing.assert_allclose(Zd2, np.diag(inv), rtol=1e-10, atol=0)



def test_supernodal_kernels_on_wide_supernodes_with_rows_below():
    # A dense group of 130 unknowns coupled to 30 later ones, after 60 sparse ones (natural order),
    # and the first of those 30 coupled to 20 more (which ends the group's supernode there):
    # a supernode wider than the selected inverse's chunk with rows below it, so every path of the
    # supernodal kernels runs; compared with the scalar kernels and numpy [C].
    rng = np.random.default_rng(11)
    n = 240
    M = np.zeros((n, n))
    M[60:190, 60:190] = rng.normal(size=(130, 130))
    M[60:190, 190:220] = rng.normal(size=(130, 30)) * (rng.random((130, 30)) < 0.5)
    M[190:220, 190:220] = rng.normal(size=(30, 30))
    M[190, 220:] = rng.normal(size=20)
    sparse = sp.random(60, n, density=0.03, random_state=12).toarray()
    M[:60] += sparse
    M = np.triu(M) + np.triu(M, 1).T
    M += np.diag(np.abs(M).sum(axis=1) + 0.1)
    S = sp.csc_matrix(M)
    f = check_factor(S)
    widths = np.diff(f.snode)
    below = np.array([f.Lp[c + 1] - f.Lp[c] - (w - 1) for c, w in zip(f.snode[:-1], widths)])
    # wide with rows below, and big enough that its update of the next supernode and its Z_RR L_RJ
    # are BLAS products
    assert np.any((widths > sf._CHUNK) & (below > 0) & (widths * below ** 2 >= sf._DENSE_PRODUCT))
    Lx, D, Zx, Zd = scalar_factor(S)
    np.testing.assert_allclose(f.D, D, rtol=1e-10, atol=0)
    np.testing.assert_allclose(f.Lx, Lx, rtol=0, atol=1e-10 * np.abs(Lx).max())
    Zx2, Zd2 = f.selected_inverse()
    np.testing.assert_allclose(Zd2, Zd, rtol=1e-10, atol=0)
    np.testing.assert_allclose(Zx2, Zx, rtol=0, atol=1e-10 * np.abs(Zd).max())



def test_postorder_visits_children_before_parents():
    # A postorder of a forest: a permutation in which every node comes after all its descendants,
    # each subtree on consecutive positions [C: definition].
    rng = np.random.default_rng(13)
    n = 300
    parent = np.array([rng.integers(j + 1, n) if j < n - 1 and rng.random() < 0.9 else -1 for j in range(n)])
    order = sf.postorder(parent)
    assert sorted(order.tolist()) == list(range(n))
    where = np.empty(n, int)
    where[order] = np.arange(n)
    size = np.ones(n, int)
    for j in range(n):                       # parents have larger labels, so this accumulates subtrees
        if parent[j] >= 0:
            size[parent[j]] += size[j]
    for j in range(n):
        if parent[j] >= 0:
            assert where[j] < where[parent[j]]
        # the subtree of j occupies the size[j] positions ending at j
        sub = order[where[j] - size[j] + 1: where[j] + 1]
        for v in sub:
            u = v
            while u != j and u != -1:
                u = parent[u]
            assert u == j


def test_amalgamated_pattern_gives_the_same_factor_and_inverse():
    # Relaxed supernodes store some zeros: L, D and Z on the enlarged pattern equal the scalar
    # kernels' on the exact pattern, and are 0 (L) where the pattern grew; Z's new entries equal
    # numpy's dense inverse there [C].
    M = random_block_spd(120, 4, 0.06, 5)
    f = sf.Factor(*sf.upper_csc(M)[:2])
    snode, Lp, Li = sf.amalgamate(f.snode, f.Lp, f.Li, f.parent, 0.2, 64, 0.6)
    assert len(snode) < len(f.snode) and len(Li) > len(f.Li)
    Cp, Ci, Cx = sf.upper_csc(M)
    low_p, low_i, take = sf.transpose_pattern(Cp, Ci)
    n = M.shape[0]
    Lx, D = np.empty(len(Li)), np.empty(n)
    assert sf.ldl_supernodal(low_p, low_i, Cx[take], snode, Lp, Li, Lx, D) == n
    Zx, Zd = np.empty(len(Li)), np.empty(n)
    sf.selected_inverse_supernodal(snode, Lp, Li, Lx, D, Zx, Zd)
    Lx0, D0, Zx0, Zd0 = scalar_factor(M)
    cols = np.repeat(np.arange(n), np.diff(Lp))
    key = cols * n + Li
    key0 = np.repeat(np.arange(n), np.diff(f.Lp)) * n + f.Li
    at = np.searchsorted(key, key0)
    np.testing.assert_array_equal(key[at], key0)
    grown = np.ones(len(Li), bool)
    grown[at] = False
    np.testing.assert_allclose(D, D0, rtol=1e-10, atol=0)
    np.testing.assert_allclose(Lx[at], Lx0, rtol=0, atol=1e-10 * np.abs(Lx0).max())
    assert grown.any() and np.abs(Lx[grown]).max() <= 1e-12 * np.abs(Lx0).max()
    np.testing.assert_allclose(Zx[at], Zx0, rtol=0, atol=1e-10 * np.abs(Zd0).max())
    inv = np.linalg.inv(M.toarray())
    np.testing.assert_allclose(Zx[grown], inv[Li[grown], cols[grown]], rtol=0, atol=1e-10 * np.abs(inv).max())


def test_supernode_columns_share_their_pattern():
    # Inside a supernode, column j's rows are j+1 followed by column j+1's rows [C: definition].
    M = random_block_spd(80, 3, 0.04, 6)
    f = sf.Factor(*sf.upper_csc(M)[:2])
    for J in range(len(f.snode) - 1):
        for j in range(f.snode[J], f.snode[J + 1] - 1):
            here = f.Li[f.Lp[j]:f.Lp[j + 1]].tolist()
            assert here == [j + 1] + f.Li[f.Lp[j + 1]:f.Lp[j + 2]].tolist()


def test_transpose_pattern_equals_scipy_transpose():
    M = random_spd(70, 0.05, 8)
    Cp, Ci, Cx = sf.upper_csc(M)
    Tp, Ti, take = sf.transpose_pattern(Cp, Ci)
    want = sp.triu(M).T.tocsc()            # scipy as reference [C]
    want.sort_indices()
    np.testing.assert_array_equal(Tp, want.indptr)
    np.testing.assert_array_equal(Ti, want.indices)
    np.testing.assert_array_equal(Cx[take], want.data)


@pytest.mark.parametrize("bad", [0, 7, 29])
def test_supernodal_factor_reports_the_first_non_positive_pivot(bad):
    # A matrix that is positive definite up to column bad - 1 and not at bad: the supernodal
    # kernel stops at the same column as the scalar one, and that column is bad [C: Sylvester's
    # criterion on the leading minors].
    M = random_block_spd(10, 3, 0.3, 9).toarray()
    n = len(M)
    Lc = np.linalg.cholesky(M[:bad, :bad]) if bad else np.zeros((0, 0))
    x = np.linalg.solve(Lc, M[:bad, bad]) if bad else np.zeros(0)
    M[bad, bad] = x @ x - 1.0              # Schur complement at bad is -1
    S = sp.csc_matrix(M)
    Cp, Ci, Cx = sf.upper_csc(S)
    f = sf.Factor(Cp, Ci)
    assert not f.factor(Cx)
    parent, Lp, Li = sf.symbolic(Cp, Ci)
    low_p, low_i, take = sf.transpose_pattern(Cp, Ci)
    Lx, D = np.empty(len(Li)), np.empty(n)
    got = sf.ldl_supernodal(low_p, low_i, Cx[take], f.snode, Lp, Li, Lx, D)
    assert got == bad
    assert sf.ldl_numeric(Cp, Ci, Cx, parent, Lp, Li, np.empty(len(Li)), np.empty(n)) == bad


# ------------------------------------------------------------------------------------------------
# a small study: maternal effect on the dam column, permanent environment on the id column,
# repeated records, missing cells, founders' records without a known dam (level -1)
# ------------------------------------------------------------------------------------------------

def small_pedigree(n=30, seed=4):
    rng = np.random.default_rng(seed)
    sire = -np.ones(n, np.int64)
    dam = -np.ones(n, np.int64)
    for i in range(8, n):
        sire[i] = rng.integers(0, i // 2)
        dam[i] = rng.integers(i // 2, i)
    gen = np.zeros(n, np.int64)
    for i in range(n):
        if sire[i] >= 0:
            gen[i] = 1 + max(gen[sire[i]], gen[dam[i]])
    return Pedigree(ids=np.array([str(i) for i in range(n)], dtype=object), sire=sire, dam=dam, generation=gen,
                    inbreeding=inbreeding(sire, dam))


def random_cov(rng, t, scale=1.0):
    a = rng.normal(size=(t, t))
    return scale * (a @ a.T + 0.5 * np.eye(t))


def small_study(t, seed=4):
    rng = np.random.default_rng(seed)
    ped = small_pedigree(seed=seed)
    n = ped.n
    rec = np.concatenate([np.arange(4, n), rng.integers(4, n, 10)])   # 10 repeated records
    nr = len(rec)
    obs = rng.random((nr, t)) > 0.25
    obs[~obs.any(axis=1), 0] = True
    dams = np.unique(ped.dam[ped.dam >= 0])
    dam_level = np.where(ped.dam[rec] >= 0, np.searchsorted(dams, ped.dam[rec]), -1)
    animals, pe_level = np.unique(rec, return_inverse=True)
    assert np.any(dam_level == -1) and not obs.all()
    design = sm.build_design(ped, rec, obs, [(dam_level, len(dams)), (pe_level, len(animals))])
    covs = [random_cov(rng, t, 0.3), random_cov(rng, t, 0.5)]
    G, R = random_cov(rng, t), random_cov(rng, t)
    resid = np.where(obs, rng.normal(size=(nr, t)), 0.0)
    return dict(ped=ped, rec=rec, obs=obs, dam_level=dam_level, n_dams=len(dams), pe_level=pe_level,
                n_pe=len(animals), design=design, G=G, R=R, covs=covs, resid=resid)


def dense_covariance(s, G, R, covs):
    """V over every cell (record-major) from the model's definition (§2.1), and the incidence
    matrices of the animals, dams and permanent-environment levels [C]."""
    nr = len(s["rec"])
    Z = np.zeros((nr, s["ped"].n))
    Z[np.arange(nr), s["rec"]] = 1.0
    Zm = np.zeros((nr, s["n_dams"]))
    ok = s["dam_level"] >= 0
    Zm[np.flatnonzero(ok), s["dam_level"][ok]] = 1.0
    Zp = np.zeros((nr, s["n_pe"]))
    Zp[np.arange(nr), s["pe_level"]] = 1.0
    A = relationship_matrix(s["ped"])
    V = (np.kron(Z @ A @ Z.T, G) + np.kron(Zm @ Zm.T, covs[0]) + np.kron(Zp @ Zp.T, covs[1])
         + np.kron(np.eye(nr), R))
    return V, A, Z, Zm, Zp


def dense_logpdf(s, resid, G, R, covs):
    """log N(resid_obs; 0, V) on the observed cells (scipy.stats.multivariate_normal) [C]."""
    V = dense_covariance(s, G, R, covs)[0]
    o = s["obs"].ravel()
    return stats.multivariate_normal(np.zeros(o.sum()), V[np.ix_(o, o)]).logpdf(resid.ravel()[o])


@pytest.mark.parametrize("t", [2, 3])
def test_sparse_log_likelihood_equals_dense_multivariate_normal(t):
    s = small_study(t)
    value = sm.logp_and_grad(s["design"], s["resid"], s["G"], s["R"], s["covs"])[0]
    want = dense_logpdf(s, s["resid"], s["G"], s["R"], s["covs"])
    assert abs(value - want) < 1e-8


def test_mme_factor_equals_dense_on_a_real_coefficient_matrix():
    s = small_study(3)
    C = sm.coefficient_matrix(s["design"], s["G"], s["R"], s["covs"])
    f = check_factor(C)
    d = s["design"]
    # the design stores the exact fill of its ordering, enlarged by relaxed supernodes: its pattern
    # is the amalgamation of the exact one and contains it [C: elementary]
    snode, Lp, Li = sf.amalgamate(f.snode, f.Lp, f.Li, f.parent)
    np.testing.assert_array_equal(d.snode, snode)
    np.testing.assert_array_equal(d.Lp, Lp)
    np.testing.assert_array_equal(d.Li, Li)
    n = f.n
    exact = set((np.repeat(np.arange(n), np.diff(f.Lp)) * n + f.Li).tolist())
    stored = set((np.repeat(np.arange(n), np.diff(d.Lp)) * n + d.Li).tolist())
    assert exact <= stored and len(stored) >= len(exact)
    assert f.nnz <= d.factor_nnz


@pytest.mark.parametrize("t", [2, 3])
def test_gradient_matches_central_finite_differences(t):
    s = small_study(t, seed=7)
    d = s["design"]
    args = [s["resid"], s["G"], s["R"], s["covs"]]
    value, d_resid, dG, dR, dcovs = sm.logp_and_grad(d, *args)
    f = lambda *a: sm.logp_and_grad(d, *a)[0]  # noqa: E731
    h = 1e-6

    def numeric(which, c=None):
        out = np.zeros((t, t))
        for j in range(t):
            for l in range(t):
                e = np.zeros((t, t))
                e[j, l] = h
                up, dn = list(args), list(args)
                if c is None:
                    up[which], dn[which] = args[which] + e, args[which] - e
                else:
                    up[3] = [m + e if i == c else m for i, m in enumerate(args[3])]
                    dn[3] = [m - e if i == c else m for i, m in enumerate(args[3])]
                out[j, l] = (f(*up) - f(*dn)) / (2 * h)
        return out

    np.testing.assert_allclose(dG, numeric(1), rtol=1e-5, atol=1e-6)
    np.testing.assert_allclose(dR, numeric(2), rtol=1e-5, atol=1e-6)
    for c in range(2):
        np.testing.assert_allclose(dcovs[c], numeric(3, c), rtol=1e-5, atol=1e-6)
    rows, cols = np.nonzero(s["obs"])
    for i, j in zip(rows[::7], cols[::7]):
        e = np.zeros_like(s["resid"])
        e[i, j] = h
        num = (f(s["resid"] + e, *args[1:]) - f(s["resid"] - e, *args[1:])) / (2 * h)
        assert d_resid[i, j] == pytest.approx(num, rel=1e-5, abs=1e-7)
    assert np.all(d_resid[~s["obs"]] == 0.0)


def test_not_positive_definite_covariance_gives_minus_infinity():
    s = small_study(2)
    bad = np.array([[1.0, 2.0], [2.0, 1.0]])
    for args in ((bad, s["R"], s["covs"]), (s["G"], bad, s["covs"]), (s["G"], s["R"], [bad, s["covs"][1]])):
        value, d_resid, dG, dR, dcovs = sm.logp_and_grad(s["design"], s["resid"], *args)
        assert value == -np.inf and not d_resid.any() and not dG.any()


def test_conditional_draw_noise_has_covariance_c_inverse():
    # With noise = the unit vectors, the draws' offsets x_s = L'^-1 D^-1/2 e_s satisfy
    # sum_s x_s x_s' = C^-1 exactly [C]; checked against numpy's dense inverse.
    s = small_study(2)
    d = s["design"]
    n_u = d.n_unknowns
    S = n_u
    zero = np.zeros((S,) + s["resid"].shape)
    rep = lambda m: np.broadcast_to(m, (S,) + np.shape(m))  # noqa: E731
    out, ok = sm.effects(d, zero, rep(s["G"]), rep(s["R"]), rep(np.stack(s["covs"])), noise=np.eye(n_u))
    assert ok.all()
    x = out.reshape(S, n_u)
    C = sm.coefficient_matrix(d, s["G"], s["R"], s["covs"]).toarray()
    inv = np.empty_like(C)
    inv[np.ix_(d.perm, d.perm)] = np.linalg.inv(C)     # back to the original order
    np.testing.assert_allclose(x.T @ x, inv, rtol=0, atol=1e-10 * np.abs(inv).max())


def test_conditional_means_equal_dense_blup():
    # Henderson (1975): the BLUP of a random effect u is cov(u, y) V^-1 (y - X b) [C with dense V]:
    # animals A Z' (x) G, dams Z_m' (x) C_m, permanent environment Z_p' (x) C_p, on the observed cells.
    s = small_study(3, seed=11)
    d = s["design"]
    t = d.t
    V, A, Z, Zm, Zp = dense_covariance(s, s["G"], s["R"], s["covs"])
    o = s["obs"].ravel()
    w = np.zeros(o.size)
    w[o] = np.linalg.solve(V[np.ix_(o, o)], s["resid"].ravel()[o])
    w = w.reshape(-1, t)                                      # V^-1 e per record, 0 where missing
    np.testing.assert_allclose(sm.apply_v_inverse(d, s["resid"], s["G"], s["R"], s["covs"]), w,
                               rtol=0, atol=1e-10 * np.abs(w).max())
    mean, ok = sm.effects(d, s["resid"][None], s["G"][None], s["R"][None], np.stack(s["covs"])[None])
    assert ok.all()
    n_a, n_m = s["ped"].n, s["n_dams"]
    want = np.concatenate([A @ Z.T @ w @ s["G"], Zm.T @ w @ s["covs"][0], Zp.T @ w @ s["covs"][1]])
    np.testing.assert_allclose(mean[0], want, rtol=0, atol=1e-10 * np.abs(want).max())
    assert mean.shape[1] == n_a + n_m + s["n_pe"]


@pytest.mark.parametrize("example", ["E3", "E1", "E2"])
def test_mrode_solutions(example):
    # Mrode (2014) p. 74 [V]: fixed effects by generalised least squares on the sparse marginal
    # likelihood, breeding values as the conditional means C^-1 r at those fixed effects
    # (Henderson 1975: the BLUP). Tolerance 1e-3 (the book prints three decimals).
    from mrode import assert_matches_solutions, config, pedigree, phenotypes

    from ped2g.fit.prepare import prepare
    from ped2g.fit.priors import fixed_covariances

    cfg = config(example)
    data = prepare(cfg, phenotypes(), pedigree(), "demo")
    fixed = fixed_covariances(cfg["model"], data.y_scale, data.traits)
    design = sm.design_for(data)
    beta = sm.generalised_least_squares(design, data.y, data.X, fixed["G"], fixed["R"])
    resid = np.where(data.missing, 0.0, data.y - data.X @ beta)
    blocks, ok = sm.effects(design, resid[None], fixed["G"][None], fixed["R"][None])
    assert ok.all()
    assert_matches_solutions(data, beta, blocks[0, :data.pedigree.n], example)
