"""Fitting the instrument model to a recorded note: partials, inharmonicity, decay, pluck and pickup.

``analysis`` finds the partials of a take (frequencies, levels at the onset, decay rates);
``placement`` reads the pluck and pickup distances, the aperture and the pickup's resonance from
the partial levels; ``synthetic`` builds takes with known answers for the accuracy benchmark.
"""
