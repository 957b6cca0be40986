"""Small batch specs shared by the client, command-line and dashboard tests."""

# y' = k y^2, y(0) = 1 has y(t) = 1 / (1 - k t) (closed form): it blows up at t = 1/k, so over
# [0, 2] the members with k < 0.5 succeed and the member with k = 1 fails.
BLOWUP = {
    "label": "blow-up sweep (test)",
    "base": {"model": {"title": "quadratic growth", "states": {"y": 1.0}, "parameters": {"k": 0.1},
                       "ddt": {"y": "k * y * y"}},
             "span": [0.0, 2.0], "output": {"count": 5}, "tolerance": {"rtol": 1e-9, "atol": 1e-12},
             "limits": {"max_steps": 20000, "max_wall_seconds": 30}},
    "members": [{"parameters": {"k": 0.1}}, {"parameters": {"k": 0.2}}, {"parameters": {"k": 0.4}},
                {"parameters": {"k": 1.0}}],
    "summaries": [{"kind": "final", "of": "y"}, {"kind": "max", "of": "y"}],
}


def exact_final(k: float) -> float:
    return 1.0 / (1.0 - 2.0 * k)
