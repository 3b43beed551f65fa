"""Monte Carlo tree search over a tabular model, compiled, with the tree held in preallocated arrays.

Why arrays: a search runs at every real step (and at every evaluation step), so it must cost no Python objects
and no allocation. The tree is rebuilt from the current state at each call. Its nodes are keyed by state (one
node per state reached, so paths that meet again share statistics) and hold, per action, a visit count and a
value sum. A simulation walks down from the root choosing actions by UCT or PUCT, draws each outcome from a
model, adds one node where it leaves the tree, evaluates that new leaf, and backs values up the path. A terminal
outcome ends a simulation; so does the depth limit, which counts tree and rollout steps together.

The model is either a learned count model (successor lists with counts and per-successor reward sums; successor
`n_states` means "the episode ended") or the environment's true table (offsets, cdf, next_state, reward,
terminated: the compiled trial's layout without the start distribution and step limit). Settings are a float
vector laid out by the `S_*` indices, so an agent can pass its `hyper` vector directly.

Selection: UCT (Kocsis & Szepesvari 2006; Sutton & Barto 2018, section 8.11) tries untried actions first in
random order, then maximises mean + c * sqrt(ln N / n); PUCT (Rosin 2011; Silver et al. 2017) maximises
mean + c * prior * sqrt(N) / (1 + n), with mean 0 for an untried action and prior = softmax(Q(s, .) / temperature).

Back-up, two rules:
- "mean": the value sum of a (node, action) adds the discounted return that followed it, so its mean is a Monte
  Carlo average (Kocsis & Szepesvari 2006). Each simulation credits a (node, action) once, with the return after
  its first occurrence: a later occurrence on the same path has less of the depth limit left.
- "bellman": after each simulation every tried action of every node on its path (deepest first) gets the model's
  one-step expectation sum_s' P(s' | s, a) (r + gamma V(s')), where V is the best tried action's value at the node
  of s' (its leaf evaluation until its first back-up; 0 for a successor without a node or a terminal one). This is the
  dynamic-programming back-up of trial-based tree search (Keller & Helmert 2013, "DP-UCT"): values spread between
  simulations through the shared nodes, so a sparse reward found once reaches the root without being averaged
  with the returns of earlier, unlucky simulations. The value sum then holds visits x that value, so value /
  visits is an action's value under both rules.
"""

from __future__ import annotations

import numpy as np
from numba import njit

from runner.agents.kernels import argmax_random_tie
from runner.streams import below, uniform

__all__ = [
    "BACKUP_BELLMAN",
    "BACKUP_MEAN",
    "ROLLOUT_GREEDY",
    "ROLLOUT_UNIFORM",
    "SELECT_PUCT",
    "SELECT_UCT",
    "SETTINGS_SIZE",
    "S_BACKUP",
    "S_C",
    "S_DEPTH",
    "S_GAMMA",
    "S_LAMBDA",
    "S_OPTIMISTIC",
    "S_ROLLOUT",
    "S_SELECTION",
    "S_SIMULATIONS",
    "S_TEMPERATURE",
    "S_UNVISITED",
    "TREE_SIZE",
    "UNVISITED_OPTIMISTIC",
    "UNVISITED_SELF_LOOP",
    "count_model_update",
    "model_step",
    "most_visited",
    "new_count_model",
    "new_tree",
    "root_feedback",
    "root_statistics",
    "run_search",
    "table_arrays",
]

(
    S_SIMULATIONS,
    S_SELECTION,
    S_C,
    S_DEPTH,
    S_GAMMA,
    S_ROLLOUT,
    S_LAMBDA,
    S_TEMPERATURE,
    S_UNVISITED,
    S_OPTIMISTIC,
    S_BACKUP,
) = range(11)
SETTINGS_SIZE = 11
"""Positions in the settings vector: simulations, selection rule, exploration constant c, depth limit, gamma,
rollout policy, lambda (PUCT's weight on the rollout return), prior temperature, unvisited-pair rule, optimistic
value, back-up rule."""

SELECT_UCT, SELECT_PUCT = 0, 1
ROLLOUT_UNIFORM, ROLLOUT_GREEDY = 0, 1
UNVISITED_OPTIMISTIC, UNVISITED_SELF_LOOP = 0, 1
BACKUP_MEAN, BACKUP_BELLMAN = 0, 1

# Tree tuple layout (see new_tree).
(
    _NODE_STATE,
    _NODE_OF_STATE,
    _NODE_VISITS,
    _NODE_VALUE,
    _EDGE_VISITS,
    _EDGE_VALUE,
    _EDGE_PRIOR,
    _EDGE_MARK,
    _PATH_NODE,
    _PATH_ACTION,
    _PATH_REWARD,
    _PATH_FIRST,
    _SCRATCH,
    _N_NODES,
) = range(14)
TREE_SIZE = 14
"""Number of arrays in a tree tuple."""
# Count model tuple layout (see new_count_model).
_SUCC, _COUNT, _REWARD_SUM, _N_SUCC, _VISITS = range(5)


def new_tree(capacity: int, n_states: int, n_actions: int, depth: int) -> tuple[np.ndarray, ...]:
    """Preallocated tree arrays: at most `capacity` nodes (never more than `n_states`), paths up to `depth` long.

    Layout: node_state, node_of_state (-1: no node), node_visits, node_value (the leaf evaluation at creation;
    under the Bellman back-up, then the best tried action's value),
    edge_visits, edge_value, edge_prior, edge_mark (last simulation that passed the edge), path_node, path_action,
    path_reward, path_first (first occurrence of its edge on the path), an int scratch row of n_actions, and the
    node count.
    """
    nodes = max(1, min(int(capacity), int(n_states)))
    return (
        np.zeros(nodes, dtype=np.int64),
        np.full(n_states, -1, dtype=np.int64),
        np.zeros(nodes, dtype=np.float64),
        np.zeros(nodes, dtype=np.float64),
        np.zeros((nodes, n_actions), dtype=np.float64),
        np.zeros((nodes, n_actions), dtype=np.float64),
        np.zeros((nodes, n_actions), dtype=np.float64),
        np.full((nodes, n_actions), -1, dtype=np.int64),
        np.zeros(depth, dtype=np.int64),
        np.zeros(depth, dtype=np.int64),
        np.zeros(depth, dtype=np.float64),
        np.zeros(depth, dtype=np.bool_),
        np.zeros(n_actions, dtype=np.int64),
        np.zeros(1, dtype=np.int64),
    )


def new_count_model(n_states: int, n_actions: int, width: int) -> tuple[np.ndarray, ...]:
    """An empty count model: successors, their counts and reward sums (width per pair), list lengths, visits."""
    shape = (n_states, n_actions, width)
    return (
        np.zeros(shape, dtype=np.int64),
        np.zeros(shape, dtype=np.float64),
        np.zeros(shape, dtype=np.float64),
        np.zeros((n_states, n_actions), dtype=np.int64),
        np.zeros((n_states, n_actions), dtype=np.float64),
    )


def table_arrays(table: tuple | None) -> tuple[np.ndarray, ...]:
    """(offsets, cdf, next_state, reward, terminated) of a compiled-path table tuple; empty arrays for None.

    Empty offsets mean "no true table": the search then uses the count model.
    """
    if table is None:
        return (
            np.zeros(0, dtype=np.int64),
            np.zeros(0, dtype=np.float64),
            np.zeros(0, dtype=np.int64),
            np.zeros(0, dtype=np.float64),
            np.zeros(0, dtype=np.bool_),
        )
    _, offsets, cdf, next_state, reward, terminated, _ = table
    return (
        np.asarray(offsets, dtype=np.int64),
        np.asarray(cdf, dtype=np.float64),
        np.asarray(next_state, dtype=np.int64),
        np.asarray(reward, dtype=np.float64),
        np.asarray(terminated, dtype=np.bool_),
    )


def root_statistics(tree: tuple[np.ndarray, ...]) -> tuple[np.ndarray, np.ndarray]:
    """(visit counts, values) of the root's actions after a search; the value of an unvisited action is NaN."""
    visits = tree[_EDGE_VISITS][0].copy()
    with np.errstate(invalid="ignore", divide="ignore"):
        values = np.where(visits > 0, tree[_EDGE_VALUE][0] / visits, np.nan)
    return visits, values


@njit(cache=True)
def root_feedback(tree, q, state, alpha):
    """Move Q(state, a) toward the root's value of every visited action a, by step alpha."""
    visits = tree[_EDGE_VISITS][0]
    values = tree[_EDGE_VALUE][0]
    for a in range(visits.shape[0]):
        if visits[a] > 0.0:
            q[state, a] += alpha * (values[a] / visits[a] - q[state, a])


@njit(cache=True)
def count_model_update(model, state, action, reward, next_state, terminated):
    """Count one real transition into the model (an ended episode is successor `n_states`)."""
    succ = model[_SUCC]
    n_states = succ.shape[0]
    target = n_states if terminated else next_state
    n = model[_N_SUCC][state, action]
    slot = -1
    for j in range(n):
        if succ[state, action, j] == target:
            slot = j
            break
    if slot < 0:
        if n == succ.shape[2]:
            raise ValueError("more distinct next states for one (state, action) than max_successors")
        slot = n
        succ[state, action, slot] = target
        model[_N_SUCC][state, action] = n + 1
    model[_COUNT][state, action, slot] += 1.0
    model[_REWARD_SUM][state, action, slot] += reward
    model[_VISITS][state, action] += 1.0


@njit(cache=True, inline="always")
def _draw(offsets, cdf, next_state, reward, terminated, succ, count, reward_sum, n_succ, visits, s, a, unvisited, rng):
    """`model_step` on unpacked arrays, so hot loops take the arrays out of their tuples once."""
    if offsets.shape[0] > 0:
        pair = s * visits.shape[1] + a
        first = offsets[pair]
        last = offsets[pair + 1] - 1
        j = last
        if first < last:
            u = uniform(rng)
            for k in range(first, last):
                if u < cdf[k]:
                    j = k
                    break
        return next_state[j], reward[j], terminated[j], False
    total = visits[s, a]
    if total == 0.0:
        return s, 0.0, False, unvisited == UNVISITED_OPTIMISTIC
    n = n_succ[s, a]
    j = n - 1
    if n > 1:
        u = uniform(rng) * total
        acc = 0.0
        for k in range(n - 1):
            acc += count[s, a, k]
            if u < acc:
                j = k
                break
    target = succ[s, a, j]
    r = reward_sum[s, a, j] / count[s, a, j]
    if target == visits.shape[0]:
        return s, r, True, False
    return target, r, False, False


@njit(cache=True)
def model_step(model, table, state, action, unvisited, stream):
    """One simulated step: (next state, reward, ended, unknown).

    With a true table (non-empty offsets) the outcome is drawn from it; else from the count model, where an
    unvisited pair is either a zero-reward self-loop or `unknown` (the caller then uses the optimistic value).
    """
    offsets, cdf, next_state, reward, terminated = table
    succ, count, reward_sum, n_succ, visits = model
    return _draw(
        offsets,
        cdf,
        next_state,
        reward,
        terminated,
        succ,
        count,
        reward_sum,
        n_succ,
        visits,
        state,
        action,
        unvisited,
        stream,
    )


@njit(cache=True)
def most_visited(tree, node, stream):
    """The action with the most visits at a node (ties at random): the search's choice."""
    return argmax_random_tie(tree[_EDGE_VISITS][node], stream)


@njit(cache=True)
def _new_node(tree, q, settings, state):
    """Add a node for `state`; -1 when the tree is full. PUCT nodes get softmax priors of Q(state, .)."""
    n_nodes = tree[_N_NODES][0]
    if n_nodes == tree[_NODE_STATE].shape[0]:
        return -1
    tree[_NODE_STATE][n_nodes] = state
    tree[_NODE_OF_STATE][state] = n_nodes
    tree[_NODE_VISITS][n_nodes] = 0.0
    tree[_NODE_VALUE][n_nodes] = 0.0
    n_actions = q.shape[1]
    edge_visits, edge_value, edge_prior, edge_mark = (
        tree[_EDGE_VISITS],
        tree[_EDGE_VALUE],
        tree[_EDGE_PRIOR],
        tree[_EDGE_MARK],
    )
    for a in range(n_actions):
        edge_visits[n_nodes, a] = 0.0
        edge_value[n_nodes, a] = 0.0
        edge_mark[n_nodes, a] = -1
    if np.int64(settings[S_SELECTION]) == SELECT_PUCT:
        temperature = settings[S_TEMPERATURE]
        top = np.max(q[state])
        total = 0.0
        for a in range(n_actions):
            w = np.exp((q[state, a] - top) / temperature)
            edge_prior[n_nodes, a] = w
            total += w
        for a in range(n_actions):
            edge_prior[n_nodes, a] /= total
    tree[_N_NODES][0] = n_nodes + 1
    return n_nodes


@njit(cache=True, inline="always")
def _select(edge_visits, edge_value, edge_prior, node_visits, scratch, node, uct, c, stream):
    """The action to follow at a node: UCT (untried first, in random order) or PUCT."""
    n_actions = edge_visits.shape[1]
    total = node_visits[node]
    if uct:
        untried = 0
        for a in range(n_actions):
            if edge_visits[node, a] == 0.0:
                scratch[untried] = a
                untried += 1
        if untried > 0:
            return scratch[below(stream, untried)]
        spread = np.log(total)
    else:
        spread = np.sqrt(total)
    best = -np.inf
    count = 0
    choice = 0
    for a in range(n_actions):
        n = edge_visits[node, a]
        if uct:
            score = edge_value[node, a] / n + c * np.sqrt(spread / n)
        else:
            score = (edge_value[node, a] / n if n > 0.0 else 0.0) + c * edge_prior[node, a] * spread / (1.0 + n)
        if score > best:
            best = score
            count = 1
            choice = a
        elif score == best:
            count += 1
            if below(stream, count) == 0:
                choice = a
    return choice


@njit(cache=True)
def _rollout(q, model, table, settings, state, steps, stream):
    """Discounted return of at most `steps` steps from `state` under the rollout policy (0 for no steps)."""
    offsets, cdf, next_state, reward, terminated = table
    succ, count, reward_sum, n_succ, visits = model
    gamma = settings[S_GAMMA]
    unvisited = np.int64(settings[S_UNVISITED])
    greedy = np.int64(settings[S_ROLLOUT]) == ROLLOUT_GREEDY
    n_actions = q.shape[1]
    total = 0.0
    discount = 1.0
    s = state
    for _ in range(steps):
        a = argmax_random_tie(q[s], stream) if greedy else below(stream, n_actions)
        s2, r, ended, unknown = _draw(
            offsets,
            cdf,
            next_state,
            reward,
            terminated,
            succ,
            count,
            reward_sum,
            n_succ,
            visits,
            s,
            a,
            unvisited,
            stream,
        )
        if unknown:
            return total + discount * settings[S_OPTIMISTIC]
        total += discount * r
        if ended:
            break
        discount *= gamma
        s = s2
    return total


@njit(cache=True)
def _leaf_value(q, model, table, settings, state, steps, stream):
    """UCT: the rollout return. PUCT: (1 - lambda) * max_a Q(leaf) + lambda * rollout return."""
    if np.int64(settings[S_SELECTION]) == SELECT_UCT:
        return _rollout(q, model, table, settings, state, steps, stream)
    lam = settings[S_LAMBDA]
    value = (1.0 - lam) * np.max(q[state])
    if lam > 0.0:
        value += lam * _rollout(q, model, table, settings, state, steps, stream)
    return value


@njit(cache=True, inline="always")
def _expected_value(model, table, node_of_state, node_value, gamma, unvisited, optimistic, state, action):
    """The model's one-step expectation sum_s' P(s' | state, action) (r + gamma V(s')), V(s') being the value kept
    at the node of s' (0 for a terminal successor or one without a node)."""
    offsets = table[0]
    if offsets.shape[0] > 0:
        cdf, next_state, reward, terminated = table[1], table[2], table[3], table[4]
        pair = state * model[_VISITS].shape[1] + action
        value = 0.0
        below_cdf = 0.0
        for j in range(offsets[pair], offsets[pair + 1]):
            target = reward[j]
            if not terminated[j]:
                node = node_of_state[next_state[j]]
                if node >= 0:
                    target += gamma * node_value[node]
            value += (cdf[j] - below_cdf) * target
            below_cdf = cdf[j]
        return value
    visits = model[_VISITS]
    total = visits[state, action]
    if total == 0.0:
        if unvisited == UNVISITED_OPTIMISTIC:
            return optimistic
        node = node_of_state[state]
        return gamma * node_value[node] if node >= 0 else 0.0
    succ, count, reward_sum = model[_SUCC], model[_COUNT], model[_REWARD_SUM]
    n_states = visits.shape[0]
    value = 0.0
    for j in range(model[_N_SUCC][state, action]):
        weight = count[state, action, j]
        target = reward_sum[state, action, j] / weight
        s2 = succ[state, action, j]
        if s2 != n_states:
            node = node_of_state[s2]
            if node >= 0:
                target += gamma * node_value[node]
        value += weight / total * target
    return value


@njit(cache=True)
def _back_up(model, table, tree, settings, length, leaf):
    """Back the simulation's values up its path, deepest step first (see the module docstring for the rules)."""
    gamma = settings[S_GAMMA]
    bellman = np.int64(settings[S_BACKUP]) == BACKUP_BELLMAN
    unvisited = np.int64(settings[S_UNVISITED])
    optimistic = settings[S_OPTIMISTIC]
    node_state, node_of_state, node_visits, node_value = (
        tree[_NODE_STATE],
        tree[_NODE_OF_STATE],
        tree[_NODE_VISITS],
        tree[_NODE_VALUE],
    )
    edge_visits, edge_value = tree[_EDGE_VISITS], tree[_EDGE_VALUE]
    path_node, path_action, path_reward, path_first = (
        tree[_PATH_NODE],
        tree[_PATH_ACTION],
        tree[_PATH_REWARD],
        tree[_PATH_FIRST],
    )
    n_actions = edge_visits.shape[1]
    g = leaf
    for k in range(length - 1, -1, -1):
        n = path_node[k]
        a = path_action[k]
        if bellman:
            state = node_state[n]
            best = -np.inf
            for b in range(n_actions):
                if edge_visits[n, b] > 0.0:
                    value = _expected_value(
                        model, table, node_of_state, node_value, gamma, unvisited, optimistic, state, b
                    )
                    edge_value[n, b] = edge_visits[n, b] * value
                    if value > best:
                        best = value
            node_value[n] = best
            continue
        g = path_reward[k] + gamma * g
        if path_first[k]:
            edge_value[n, a] += g
        else:
            edge_visits[n, a] -= 1.0
            node_visits[n] -= 1.0


@njit(cache=True)
def run_search(q, model, table, tree, settings, root_state, stream):
    """Rebuild the tree at `root_state` (node 0) and run the settings' number of simulations; return that number.

    Each simulation selects down the tree, adds one node where it leaves it, evaluates that leaf and backs up.
    Nodes are keyed by state, so a path can pass a node again (a wall bump is a self-loop): a visit is counted as
    soon as its action is chosen, so a second choice at the same node sees the first (otherwise every pass of a
    loop would repeat the same choice until the depth limit). `q` (n_states x n_actions) serves greedy rollouts,
    PUCT priors and PUCT leaf values; it is only read.
    """
    offsets, cdf, next_state, reward, terminated = table
    succ, count, reward_sum, n_succ, visits = model
    node_state, node_of_state, node_visits = tree[_NODE_STATE], tree[_NODE_OF_STATE], tree[_NODE_VISITS]
    edge_visits, edge_value, edge_prior, mark = (
        tree[_EDGE_VISITS],
        tree[_EDGE_VALUE],
        tree[_EDGE_PRIOR],
        tree[_EDGE_MARK],
    )
    path_node, path_action, path_reward, path_first = (
        tree[_PATH_NODE],
        tree[_PATH_ACTION],
        tree[_PATH_REWARD],
        tree[_PATH_FIRST],
    )
    scratch = tree[_SCRATCH]
    for i in range(tree[_N_NODES][0]):
        node_of_state[node_state[i]] = -1
    tree[_N_NODES][0] = 0
    _new_node(tree, q, settings, root_state)
    depth = np.int64(settings[S_DEPTH])
    unvisited = np.int64(settings[S_UNVISITED])
    optimistic = settings[S_OPTIMISTIC]
    uct = np.int64(settings[S_SELECTION]) == SELECT_UCT
    c = settings[S_C]
    simulations = np.int64(settings[S_SIMULATIONS])
    for sim in range(simulations):
        node = 0
        state = root_state
        length = 0
        leaf = 0.0
        while True:
            a = _select(edge_visits, edge_value, edge_prior, node_visits, scratch, node, uct, c, stream)
            edge_visits[node, a] += 1.0
            node_visits[node] += 1.0
            path_first[length] = mark[node, a] != sim
            mark[node, a] = sim
            s2, r, ended, unknown = _draw(
                offsets,
                cdf,
                next_state,
                reward,
                terminated,
                succ,
                count,
                reward_sum,
                n_succ,
                visits,
                state,
                a,
                unvisited,
                stream,
            )
            path_node[length] = node
            path_action[length] = a
            path_reward[length] = optimistic if unknown else r
            length += 1
            if unknown or ended:
                break
            if length == depth:
                leaf = _leaf_value(q, model, table, settings, s2, 0, stream)
                break
            child = node_of_state[s2]
            if child < 0:
                leaf = _leaf_value(q, model, table, settings, s2, depth - length, stream)
                child = _new_node(tree, q, settings, s2)
                if child >= 0:
                    tree[_NODE_VALUE][child] = leaf
                break
            node = child
            state = s2
        _back_up(model, table, tree, settings, length, leaf)
    return simulations
