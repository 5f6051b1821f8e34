"""The report's colours, in one place: the plots use them and the page's style sheet gets them as variables."""

PALETTE = {
    "ink": "#1f2933",  # text, totals
    "muted": "#5b6770",  # tick labels, secondary text
    "rule": "#9aa5ad",  # axes and table rules
    "grid": "#e3e7ea",
    "paper": "#f7f5f0",  # page background
    "panel": "#ffffff",
    "estimator": "#23707e",  # the estimator and the calibration data
    "coefficients": "#9cc5cc",
    "rounding": "#d9b46a",
    "inputs": "#8d79b5",  # input quantization, random box points
    "bound": "#c2562b",  # proven bounds, trend lines
    "limit": "#8a3b12",  # budget lines and overflow limits
    "headroom": "#cfe3d5",
    "uncovered": "#f1d9c9",
    "pass": "#2f7d4f",
    "fail": "#b3261e",
}
