"""Published data sets for the estimation checks, typed in by hand.

NIST StRD nonlinear regression (https://www.itl.nist.gov/div898/strd/nls/nls_main.shtml):
BoxBOD (Box, Hunter & Hunter 1978, Statistics for Experimenters, pp. 483-487) and Misra1a
(Misra 1978, NIST dental research, monomolecular adsorption), both y = b1 (1 - exp(-b2 x)).
Data, starts and certified values were typed in from memory and then compared with copies of
the NIST files in several public repositories; they agree digit for digit. The tests also
refit the closed form with scipy.optimize.curve_fit as an independent cross-check.

Thermal isomerisation of alpha-pinene: Box, Hunter, MacGregor & Erjavec (1973),
Technometrics 15, 33-51; the data as used by Tjoa & Biegler (1991) and in the COPS collection
(Dolan, More & Munson 2004, problem "pinene"). Data typed in from memory, then compared with
public copies of the COPS problem (identical). Published optimum, from memory: sum of squares
about 19.87, rate constants about 5.93e-5, 2.96e-5, 2.05e-5, 27.5e-5, 4.0e-5 per minute (COPS
solves a collocation discretisation, so its last digits differ slightly from the exact ODE's).
"""
import numpy as np

BOXBOD = {
    "x": [1.0, 2.0, 3.0, 5.0, 7.0, 10.0],
    "y": [109.0, 149.0, 149.0, 191.0, 213.0, 224.0],
    "starts": [[1.0, 1.0], [100.0, 0.75]],
    "certified": {"b1": 2.1380940889e02, "b2": 5.4723748542e-01},
    "certified_sd": {"b1": 1.2354515176e01, "b2": 1.0455993237e-01},
    "residual_sum_of_squares": 1.1680088766e03,
    "dof": 4,
}

MISRA1A = {
    "x": [77.6, 114.9, 141.1, 190.8, 239.9, 289.0, 332.8, 378.4, 434.8, 477.3, 536.8, 593.1,
          689.1, 760.0],
    "y": [10.07, 14.73, 17.94, 23.93, 29.61, 35.18, 40.02, 44.82, 50.76, 55.05, 61.01, 66.40,
          75.47, 81.78],
    "starts": [[500.0, 1e-4], [250.0, 5e-4]],
    "certified": {"b1": 2.3894212918e02, "b2": 5.5015643181e-04},
    "certified_sd": {"b1": 2.7070075241e00, "b2": 7.2668688436e-06},
    "residual_sum_of_squares": 1.2455138894e-01,
    "dof": 12,
}

# y = b1 (1 - exp(-b2 x)) solves dy/dx = b2 (b1 - y), y(0) = 0
EXPONENTIAL_RISE = {"title": "y = b1 (1 - exp(-b2 x)) as an ODE", "states": {"y": 0.0},
                    "parameters": {"b1": 1.0, "b2": 1.0}, "ddt": {"y": "b2 * (b1 - y)"}}

PINENE_TIMES = np.array([1230.0, 3060.0, 4920.0, 7800.0, 10680.0, 15030.0, 22620.0, 36420.0])  # min
PINENE_DATA = np.array([  # per cent of: alpha-pinene, dipentene, allo-ocimene, pyronene, dimer
    [88.35, 7.3, 2.3, 0.4, 1.75],
    [76.4, 15.6, 4.5, 0.7, 2.8],
    [65.1, 23.1, 5.3, 1.1, 5.8],
    [50.4, 32.9, 6.0, 1.5, 9.3],
    [37.5, 42.7, 6.0, 1.9, 12.0],
    [25.9, 49.1, 5.9, 2.2, 17.0],
    [14.0, 57.4, 5.1, 2.6, 21.0],
    [4.5, 63.1, 3.8, 2.9, 25.7],
])
PINENE_PUBLISHED = {"sum_of_squares": 19.87, "p1": 5.93e-5, "p2": 2.96e-5, "p3": 2.05e-5,
                    "p4": 27.5e-5, "p5": 4.0e-5}
# y' = A(p) y, the linear first-order scheme of Box et al. (1973)
PINENE_MODEL = {
    "title": "Thermal isomerisation of alpha-pinene (Box, Hunter, MacGregor & Erjavec 1973)",
    "states": {"y1": 100.0, "y2": 0.0, "y3": 0.0, "y4": 0.0, "y5": 0.0},
    "parameters": {"p1": 1e-5, "p2": 1e-5, "p3": 1e-5, "p4": 1e-5, "p5": 1e-5},
    "ddt": {"y1": "-(p1 + p2) * y1", "y2": "p1 * y1", "y3": "p2 * y1 - (p3 + p4) * y3 + p5 * y5",
            "y4": "p3 * y3", "y5": "p4 * y3 - p5 * y5"},
}


def pinene_matrix(p):
    p1, p2, p3, p4, p5 = p
    return np.array([[-(p1 + p2), 0, 0, 0, 0], [p1, 0, 0, 0, 0], [p2, 0, -(p3 + p4), 0, p5],
                     [0, 0, p3, 0, 0], [0, 0, p4, 0, -p5]])
