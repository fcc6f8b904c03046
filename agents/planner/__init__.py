"""Bounded-optimal planner: finite-horizon dynamic programming over a discretised hotkey memory.

For each command separately the planner builds a small Markov decision process whose state is the
command's memory at the moment it is needed, and solves it exactly for every number of uses left.
Sources: the cost formulas of :mod:`shortcut_gym.envs.costs` (KLM, Card, Moran & Newell 1980;
Fitts' law, MacKenzie 1992; menu model, Cockburn, Gutwin & Greenberg 2007) and the memory model of
:mod:`shortcut_gym.envs.memory` (ACT-R base level, Anderson & Lebiere 1998; O(1) hybrid form,
Petrov 2006; exponential and power forgetting, Wixted & Ebbesen 1991). Finite-horizon DP:
Bellman (1957), *Dynamic Programming*; Puterman (1994), *Markov Decision Processes*, ch. 4.
The world's semantics it follows are those of :mod:`shortcut_gym.envs.kernel`.

Modules, one concern each: :mod:`.action_costs` (seconds of each path), :mod:`.memory_model`
(gaps between uses, trace decay, two-number memory ageing), :mod:`.interpolation` (compiled
bilinear lookup on the state grid), :mod:`.mdp` (the per-command MDP), :mod:`.solver` (backward
induction, state occupancy), :mod:`.search` (hand-share fixed points, the choice between plans),
:mod:`.break_even` (the analytic rule), :mod:`.next_uses` and :mod:`.agent` (the policy).

The MDP of command c (states s, actions menu/hotkey/learn, stages = uses of c left):

* State 0: no trace (strength S = 0, recall probability 0). States 1..: a pair (activation
  A = ln S on a uniform grid of ``n_bins`` points from tau - 8 s to tau + 8 s, tau and s the
  world's retrieval threshold and noise; total trace weight W on a geometric grid of
  ``n_weight_bins`` points from the smallest trace weight to the largest weight times the top
  command's expected uses; one point for exponential memory, which needs no W).
  The recall probability of a state is the logistic of its grid activation.
* Transition: the action lays a trace of the world's weight (learn; hotkey recalled with
  probability p or failed with 1 - p; menu), then the time to the command's next use passes.
  The gap is drawn from the usage probability (trials between uses ~ geometric(p_c)), the trial
  interval and the between-session gaps (a gap of k trials crosses k / trials_per_session session
  boundaries, the fractional part as a probability), discretised by 8 equal-probability quantiles.
  The new (A, W) is spread bilinearly (A linear, W in log) over the neighbouring grid points.
* Reward: minus the expected seconds of the action in that state, plus the homing time the
  action causes on the next trial (approximation 2): the marginal cost of the decision.

Approximations (each makes the planner exact only for its own model, not for the simulator):

1. Memory history collapses to two numbers. Under ACT-R decay the old traces age as one lump of
   their total weight W at the effective age a that gives the current strength (S = W a^-d), so
   S' = W (a + g)^-d + w g^-d and W' = W + w: a command practised over days keeps more of its
   strength across a night than one learned a minute ago. Power forgetting uses the same lump
   with (1 + a/u)^-b; exponential decay is exact (S' = (S + w) e^{-lambda g}). Spacing-sensitive
   decay is not supported. Within-session versus overnight gaps are mixed by the unconditional
   gap law in later stages (a first use early in a session is followed by a same-day use more
   often than that law says), which the decision-time step corrects for the next use only.
2. The hand position is shared by all commands, so it is a mean field. With ``keyboard_share``
   None (default) the plan finds its own shares by fixed point: start from a menu-only world,
   solve, measure the plan's usage-weighted share of uses that recall a hotkey (ks: the hand is
   on the keyboard before a trial) and that attempt one (q: the next trial wants the keyboard),
   solve again (at most 6 rounds); the same from a keyboard-only start. A trial next to this one
   is the same command with its usage probability p_c and taken to repeat this trial's device, so
   a hotkey sees the hand on the keyboard before and after it with p_c + (1 - p_c) ks (q), a menu
   with (1 - p_c) ks (q). A menu then costs its share of H, a hotkey the rest, and the action is
   charged the next trial's homing too. Each switch is thus counted by both trials next to it:
   right for decisions (both cause it), so plan values overstate total homing time
   (:func:`predicted_time_s` and the break-even table count each once). A number fixes ks = q
   before every trial (no own-command correction). The shares of the other trials are taken as
   independent of this command's state and constant over the horizon (the plan's average).
3. Menu expertise: a menu selection at n uses left is taken as the command's t-th with
   t = U - n + 1 (U its expected uses: exact on a menu-only path, too high after hotkey uses) and
   pays the novice term (search - decision) / t on top of the full-expertise menu; at decision
   time the current trial's term uses the known count. (``menu_expertise=False``: e = 1 throughout.)
4. Recall latency and probability of a future use come from the grid state; commands are
   planned independently; failure costs use the world's commission share as an expectation.
5. Uses left = 1 + round(p_c x trials after this one), not the realised count; the value of the
   next use is read at that count minus one whatever the gap drawn.

The executed policy (:mod:`.selection`): because of these approximations a plan alone can lose
to a simple rule where recall is hard (threshold -1.5, 30 days between sessions, fast typist: 10 s
per user worse than always-menu). :func:`plan_world` therefore compares, on 32 common simulated
users of the world's own model (seeds from :data:`SELECTION_SEED`, never the scored users), both
plans, each plan restricted to the commands where it beat the menu, and the fixed rules
(always-menu, always-hotkey, learn-first-k for k = 1, 2, 3, learn-first-1 on the commands where it
pays), and executes the fastest (:class:`PolicyChoice`, in ``Plan.choice``; every candidate's mean in
``Plan.candidate_times_s``). That is a policy of what the env shows.

The agent (:class:`BoundedOptimalPlanner`) tracks each command's memory from its own history and
costs the current trial exactly (see :mod:`.agent`). The break-even rule (:func:`break_even_table`)
compares the all-menu world with the learn-at-first-use world with the recall the simulator's own
memory gives along that path (:func:`learn_once_recall`). :mod:`.exact` solves small worlds exactly
over the simulator's full state (the reference the planner's optimality gap is measured against).

Measured effect of the approximations (docs/planner.md): on the 14 small worlds of
:data:`.exact.SMALL_WORLDS` the plan alone is at most 0.944% above the exact optimum and the
executed policy at most 0.382% (equal on 11); on a grid of hard memories (thresholds -4.5 to -1.5,
gaps 1 h to 30 days, fast and slow typists, cheap and dear learning) the executed policy is never
above a fixed rule or zoo agent by more than 2 paired standard errors over 32 users.
"""

from shortcut_gym.agents.planner.action_costs import ActionTimes, action_rewards, action_times
from shortcut_gym.agents.planner.agent import BoundedOptimalPlanner
from shortcut_gym.agents.planner.break_even import PATH_USERS, break_even_table, learn_once_recall
from shortcut_gym.agents.planner.exact import ExactMDP, evaluate_exactly, exact_mdp, small_world
from shortcut_gym.agents.planner.interpolation import GridConstants
from shortcut_gym.agents.planner.mdp import GRID_HALF_WIDTH, CommandMDP, build_command_mdp
from shortcut_gym.agents.planner.memory_model import (
    N_GAP_QUANTILES,
    PLANNER_MEMORY_REASON,
    PlannerMemoryError,
    check_memory_kind,
    gap_distribution,
    planner_memory_refusal,
    weight_grid,
)
from shortcut_gym.agents.planner.next_uses import NextUses, next_use_points
from shortcut_gym.agents.planner.search import (
    SELECTION_USERS,
    Plan,
    expected_uses,
    plan_world,
    predicted_time_s,
)
from shortcut_gym.agents.planner.selection import SELECTION_SEED, PolicyChoice, select_policy
from shortcut_gym.agents.planner.solver import CsrRows, hotkey_shares, solve_finite_horizon, state_occupancy

__all__ = [
    "GRID_HALF_WIDTH",
    "N_GAP_QUANTILES",
    "PATH_USERS",
    "PLANNER_MEMORY_REASON",
    "SELECTION_SEED",
    "SELECTION_USERS",
    "ActionTimes",
    "BoundedOptimalPlanner",
    "CommandMDP",
    "CsrRows",
    "ExactMDP",
    "GridConstants",
    "NextUses",
    "Plan",
    "PlannerMemoryError",
    "PolicyChoice",
    "action_rewards",
    "action_times",
    "break_even_table",
    "build_command_mdp",
    "check_memory_kind",
    "evaluate_exactly",
    "exact_mdp",
    "expected_uses",
    "gap_distribution",
    "hotkey_shares",
    "learn_once_recall",
    "next_use_points",
    "plan_world",
    "planner_memory_refusal",
    "predicted_time_s",
    "select_policy",
    "small_world",
    "solve_finite_horizon",
    "state_occupancy",
    "weight_grid",
]
