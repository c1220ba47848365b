"""Flow-pattern vocabulary (the trade's terms) shared by solver, data schema and plots.

Integer codes index :data:`PATTERNS`. ``bubble`` is the upward-flow bubbly pattern of Taitel,
Barnea & Dukler (1980); ``intermittent`` covers slug, elongated-bubble and churn flow.
"""
from __future__ import annotations

STRATIFIED_SMOOTH = "stratified_smooth"
STRATIFIED_WAVY = "stratified_wavy"
INTERMITTENT = "intermittent"
ANNULAR = "annular"
DISPERSED_BUBBLE = "dispersed_bubble"
BUBBLE = "bubble"
SINGLE_PHASE_LIQUID = "single_phase_liquid"
SINGLE_PHASE_GAS = "single_phase_gas"

PATTERNS: tuple[str, ...] = (
    STRATIFIED_SMOOTH,
    STRATIFIED_WAVY,
    INTERMITTENT,
    ANNULAR,
    DISPERSED_BUBBLE,
    BUBBLE,
    SINGLE_PHASE_LIQUID,
    SINGLE_PHASE_GAS,
)
CODE = {name: i for i, name in enumerate(PATTERNS)}
#: patterns whose holdup comes from the separated-flow (two-fluid) equilibrium
SEPARATED = (STRATIFIED_SMOOTH, STRATIFIED_WAVY, ANNULAR)
STRATIFIED_PATTERNS = (STRATIFIED_SMOOTH, STRATIFIED_WAVY)

# Separated configurations: the geometry in which the two-fluid balance is solved (a layer or a
# film; closure_nn.physics.geometry), distinct from the flow pattern an observer reports.
CONFIG_STRATIFIED = "stratified"
CONFIG_ANNULAR = "annular"
CONFIGURATIONS: tuple[str, ...] = (CONFIG_STRATIFIED, CONFIG_ANNULAR)
#: the separated configuration of each pattern that has one (the others are not separated flow)
CONFIGURATION_OF_PATTERN = {STRATIFIED_SMOOTH: CONFIG_STRATIFIED, STRATIFIED_WAVY: CONFIG_STRATIFIED,
                            ANNULAR: CONFIG_ANNULAR}
