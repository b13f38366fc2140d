"""The gradient-error model and its scores: exact moments, process variation, the slot
grid, grades, the electrical budget and the routing-effort estimate."""
