"""The engine's rendered audio measured against the physics it claims to compute.

Every expected value is computed here from the published formulas (or read off
scipy), not taken from the engine: partial frequencies (Fletcher 1964), plucked
and struck coefficients (Fletcher & Rossing 1998 ch. 2), pickup weights (Paiva,
Pakarinen & Valimaki 2012), decay (Chaigne & Askenfelt 1994), 12-TET (MIDI 1.0, ISO 16).
"""

import math

import numpy as np
import pytest
from analysis import db, decay_rate_per_s, fit_damped_modes, peak_frequency_hz
from support.describe import failing, nonfinite

from rtvoice.engine.housekeeping import RETIRE_LEVEL
from rtvoice.engine.output import CEILING
from rtvoice.engine.renderer import OUTPUT_SCALE, Engine
from rtvoice.engine.settings import Settings
from rtvoice.engine.voices import HELD, SOUNDING
from rtvoice.offline.render import note_events, render_events

FS = 48000
LN1000 = 3 * math.log(10)


def clean(**values) -> Settings:
    """Settings with the electronics bypassed and a long sustain, plus ``values`` (dots as __)."""
    base = {"electronics.resonance_hz": 0.0, "output.gain_db": 0.0, "string.t60_low": 8.0,
            "string.t60_high": 4.0, "excitation.width": 0.0, "pickup.0.width": 0.0}
    base.update({k.replace("__", "."): v for k, v in values.items()})
    return Settings.defaults().with_values(base)


def clean_open(**values) -> Settings:
    """:func:`clean` with every note an open string of its own (``instrument.assign = "open"``), for
    the checks of the open-string model: pluck and pickup as fractions of the note's own length,
    anywhere along it; ``string.inharmonicity`` as every note's B (a fretted voice takes its
    string's B from the gauge, x 2^(n/6) at fret n); any note, any number of them at once."""
    return clean(instrument__assign="open", **values)


#: The engine's output is this many frames late (a fixed delay, its limiter's look-ahead, documented
#: in Engine.stats.latency_frames): a note-on at sample n of a block is heard from sample n + LATENCY
#: of what Engine.render returns. Offline renders (render_events) take the delay off.
LATENCY = Engine(clean(), FS, 256).stats.latency_frames


def render_note(settings: Settings, note=57, velocity=127, seconds=1.5, block=256) -> np.ndarray:
    """The note's audio from its note-on (an offline render takes the output's fixed latency off itself)."""
    return render_events(note_events(note, velocity, seconds), settings, FS, block, tail_cap_s=0.0)


def damping(f, t60_low=8.0, t60_high=4.0):
    """sigma = b1 + b3 w^2 through the two given decay times (Chaigne & Askenfelt 1994)."""
    w_lo, w_hi = 2 * np.pi * 100, 2 * np.pi * 2000
    s_lo, s_hi = LN1000 / t60_low, LN1000 / t60_high
    b3 = (s_hi - s_lo) / (w_hi**2 - w_lo**2)
    return s_lo - b3 * w_lo**2 + b3 * (2 * np.pi * np.asarray(f)) ** 2


def test_note_69_is_440_hz_in_the_audio():
    # MIDI 1.0 Detailed Specification: note 69 = A4; ISO 16:1975: A4 = 440 Hz.
    x = render_note(clean(string__inharmonicity=0.0), note=69, seconds=1.2)
    assert peak_frequency_hz(x[2400:50400], FS, 440.0, 30.0) == pytest.approx(440.0, abs=0.05)


def test_stiff_string_partials_in_the_audio_follow_fletcher():
    # Fletcher, JASA 36, 203 (1964): f_k = k f0 sqrt(1 + B k^2), measured from the rendered audio.
    b = 1e-3
    # open rule: the note's B is string.inharmonicity (a fretted voice takes its string's own B)
    s = clean_open(string__inharmonicity=b, excitation__position=0.13, pickup__0__position=0.07)
    x = render_note(s, note=40, seconds=1.2)
    f0 = 440 * 2 ** ((40 - 69) / 12)
    for k in (2, 5, 10, 20):
        expected = k * f0 * math.sqrt(1 + b * k * k)
        measured = peak_frequency_hz(x[2400:50400], FS, expected, 0.3 * f0)
        assert measured == pytest.approx(expected, rel=2e-4), k


def test_partial_t60_in_the_audio_follows_the_damping_law():
    # Chaigne & Askenfelt, JASA 95(2) 1112 (1994): sigma = b1 + b3 (2 pi f)^2, T60 = 3 ln 10 / sigma.
    s = clean(string__t60_low=3.0, string__t60_high=0.8, string__inharmonicity=0.0,
              excitation__position=0.21, pickup__0__position=0.11)
    x = render_note(s, note=45, seconds=2.0)[: 2 * FS]
    f0 = 110.0
    harmonics = f0 * np.arange(1, 9)
    for k in (1, 3, 6):
        sigma = decay_rate_per_s(x, FS, harmonics[k - 1], np.delete(harmonics, k - 1))
        assert LN1000 / sigma == pytest.approx(LN1000 / damping(harmonics[k - 1], 3.0, 0.8), rel=0.02), k


def predicted_levels(k, pluck, pickup, sensing, velocity=127, gain_db=0.0):
    """Harmonic amplitudes in the output from the closed forms alone (displacement or velocity pickup)."""
    a = 2 * np.sin(k * np.pi * pluck) / (k**2 * np.pi**2 * pluck * (1 - pluck))  # Fletcher & Rossing ch. 2
    w = np.sin(k * np.pi * pickup)  # point pickup senses the mode shape
    sens = k if sensing == "velocity" else 1.0  # velocity sensing: weight w_k / w_1 (Horton & Moore 2009)
    return OUTPUT_SCALE * (velocity / 127) ** 2 * 10 ** (gain_db / 20) * np.abs(a * w * sens)


@pytest.mark.parametrize("sensing", ["displacement", "velocity"])
@pytest.mark.parametrize(("pluck", "pickup"), [(0.2, 0.15), (0.5, 0.27), (0.08, 0.33)])
def test_harmonic_levels_match_the_model_within_half_a_db(sensing, pluck, pickup):
    # open rule: pluck and pickup are fractions of the note's own length, some past a fretted neck's end
    s = clean_open(string__inharmonicity=0.0, excitation__position=pluck, pickup__0__position=pickup,
              pickup__0__sensing=sensing)
    x = render_note(s, note=57, seconds=1.0)[:9600]
    k = np.arange(1, 25)
    f = 220.0 * k
    c = fit_damped_modes(x, FS, f, damping(f))
    expected = predicted_levels(k, pluck, pickup, sensing)
    audible = expected > expected.max() * 10 ** (-50 / 20)
    np.testing.assert_allclose(db(c[audible]), db(expected[audible]), atol=0.5)


def test_pluck_at_a_quarter_removes_every_fourth_harmonic_in_the_audio():
    # Common practice among players (follows from sin(k pi p)): plucking at 1/n removes every n-th harmonic.
    # Only the 16 fitted modes are rendered, so the least-squares fit sees the whole signal.
    # Open rule: the nulls sit at fractions of the note's own length.
    s = clean_open(string__inharmonicity=0.0, excitation__position=0.25, pickup__0__position=0.1, string__modes=16)
    x = render_note(s, note=50, seconds=1.0)[:9600]
    f0 = 440 * 2 ** ((50 - 69) / 12)
    k = np.arange(1, 17)
    c = np.abs(fit_damped_modes(x, FS, f0 * k, damping(f0 * k)))
    rel = db(c / c.max())
    # sin(4 pi / 4) = 0 exactly; what remains is the DC blocker's onset transient and float32 rounding.
    assert np.all(rel[[3, 7, 11, 15]] < -70), \
        f"harmonics 4, 8, 12, 16 at {np.round(rel[[3, 7, 11, 15]], 1)} dB, want < -70 dB"
    assert np.all(rel[[0, 1, 2, 4, 5, 6]] > -30), \
        f"harmonics 1-3, 5-7 at {np.round(rel[[0, 1, 2, 4, 5, 6]], 1)} dB, want > -30 dB"


def test_pickup_at_a_third_removes_every_third_harmonic_in_the_audio():
    # open rule: a third of the note's own length, past the default neck's last fret (0.28 of the scale)
    s = clean_open(string__inharmonicity=0.0, excitation__position=0.11, pickup__0__position=1 / 3,
              pickup__0__sensing="displacement", string__modes=12)
    x = render_note(s, note=50, seconds=1.0)[:9600]
    f0 = 440 * 2 ** ((50 - 69) / 12)
    k = np.arange(1, 13)
    c = np.abs(fit_damped_modes(x, FS, f0 * k, damping(f0 * k)))
    rel = db(c / c.max())
    assert np.all(rel[[2, 5, 8, 11]] < -70), \
        f"harmonics 3, 6, 9, 12 at {np.round(rel[[2, 5, 8, 11]], 1)} dB, want < -70 dB"
    assert np.all(rel[[0, 1, 3, 4]] > -30), \
        f"harmonics 1, 2, 4, 5 at {np.round(rel[[0, 1, 3, 4]], 1)} dB, want > -30 dB"


def test_electronics_shape_the_harmonics_as_the_analog_low_pass():
    # The coil-and-cable low-pass: the ratio of harmonic levels with and without it follows
    # |1 / (1 + s/(Q w_r) + s^2/w_r^2)| (second-order low-pass; circuit values give f_r and Q).
    import scipy.signal

    f_r, q = 3000.0, 4.0
    # open rule: the fit takes partials at k 110 Hz, a harmonic string (B = 0 from string.inharmonicity;
    # a fretted voice takes its string's B)
    base = clean_open(string__inharmonicity=0.0, excitation__position=0.09, pickup__0__position=0.06)
    dry = render_note(base, note=45, seconds=1.0)[4800:14400]
    wet = render_note(base.with_values({"electronics.resonance_hz": f_r, "electronics.q": q}), note=45,
                      seconds=1.0)[4800:14400]
    k = np.arange(1, 61)
    f = 110.0 * k
    sig = damping(f)
    c_dry = np.abs(fit_damped_modes(dry, FS, f, sig))
    ratio = np.abs(fit_damped_modes(wet, FS, f, sig)) / c_dry
    w_r = 2 * np.pi * f_r
    _, h = scipy.signal.freqs([w_r**2], [1, w_r / q, w_r**2], worN=2 * np.pi * f)
    strong = c_dry > c_dry.max() * 1e-2  # harmonics near a pluck or pickup null carry no measurable ratio
    assert strong.sum() > 40
    np.testing.assert_allclose(db(ratio[strong]), db(h[strong]), atol=0.3)


def test_note_lands_on_its_exact_sample():
    engine = Engine(clean(pickup__0__sensing="displacement"), FS, 256)
    engine.render()
    out = engine.render([(100, 0x90, 60, 100)]).copy()
    assert out.size > 100 + LATENCY  # the fixed latency keeps the onset in this block
    assert np.all(out[: 100 + LATENCY] == 0.0), \
        "sound before the note's sample: " + failing(out[: 100 + LATENCY] == 0.0, out[: 100 + LATENCY], what="samples")
    assert abs(out[100 + LATENCY]) > 1e-3


def test_note_off_lands_on_its_exact_sample():
    # After a note-off at sample n the partials decay at the release rate from n on.
    s = clean(string__release=0.05, pickup__0__sensing="displacement")
    a = Engine(s, FS, 256)
    b = Engine(s, FS, 256)
    a.render([(0, 0x90, 60, 100)])
    b.render([(0, 0x90, 60, 100)])
    ya = a.render([(37, 0x80, 60, 0)]).copy()
    yb = b.render().copy()
    # Identical up to float32 rounding of the block product before the note-off ...
    np.testing.assert_allclose(ya[:37], yb[:37], atol=1e-6)
    assert np.max(np.abs(ya[37:] - yb[37:])) > 1e-4


def test_rendering_is_deterministic():
    s = Settings.defaults()
    events = [(0.0, 0x90, 60, 90), (0.3, 0x90, 64, 80), (0.5, 0xE0, 0, 80), (0.9, 0x80, 60, 0)]
    a = render_events(events, s, FS, 256, tail_cap_s=0.5)
    b = render_events(events, s, FS, 256, tail_cap_s=0.5)
    assert np.array_equal(a, b)


def test_same_audio_for_any_block_size():
    # The block factoring is an implementation detail: block sizes must agree to float32 precision.
    s = clean()
    events = [(0.0, 0x90, 52, 100), (0.013, 0x90, 59, 90), (0.2, 0x80, 52, 0)]
    ref = render_events(events, s, FS, 64, tail_cap_s=0.0)[:9600]
    for block in (100, 256, 1024):
        other = render_events(events, s, FS, block, tail_cap_s=0.0)[:9600]
        np.testing.assert_allclose(other, ref, atol=2e-6)


def test_velocity_zero_note_on_is_a_note_off():
    # MIDI 1.0: note-on with velocity 0 is a note-off.
    s = clean(string__release=0.05)
    y = render_events([(0.0, 0x90, 60, 100), (0.1, 0x90, 60, 0)], s, FS, 256, tail_cap_s=2.0)
    assert y.size < int(0.8 * FS)  # rang out quickly after the release


def test_sustain_pedal_holds_released_notes():
    s = clean(string__release=0.05)
    held = render_events([(0.0, 0xB0, 64, 127), (0.0, 0x90, 60, 100), (0.1, 0x80, 60, 0)], s, FS, 256,
                         tail_cap_s=0.5)
    free = render_events([(0.0, 0x90, 60, 100), (0.1, 0x80, 60, 0)], s, FS, 256, tail_cap_s=0.5)
    assert held.size > free.size
    free = np.pad(free, (0, held.size - free.size))
    window = slice(int(0.3 * FS), int(0.4 * FS))
    assert np.max(np.abs(held[window])) > 100 * (np.max(np.abs(free[window])) + 1e-9)


def test_all_notes_off_keeps_sustained_notes_and_all_sound_off_silences():
    # MIDI 1.0: CC123 releases keys but sustained notes keep sounding; CC120 silences at once.
    s = clean(string__release=0.05)
    pedal = render_events([(0.0, 0xB0, 64, 127), (0.0, 0x90, 60, 100), (0.1, 0xB0, 123, 0)], s, FS, 256,
                          tail_cap_s=0.5)
    assert np.max(np.abs(pedal[int(0.35 * FS):int(0.5 * FS)])) > 1e-3
    quiet = render_events([(0.0, 0xB0, 64, 127), (0.0, 0x90, 60, 100), (0.1, 0xB0, 120, 0)], s, FS, 256,
                          tail_cap_s=0.5)
    assert np.max(np.abs(quiet[int(0.2 * FS):])) < 1e-5 if quiet.size > 0.2 * FS else True
    assert quiet.size < int(0.3 * FS)


def test_pitch_bend_with_range_set_by_rpn0():
    # MIDI 1.0: RPN 0 (CC101 = 0, CC100 = 0, CC6 = semitones) sets the bend range; 16383 = full up.
    s = clean(string__inharmonicity=0.0)
    rpn = [(0.0, 0xB0, 101, 0), (0.0, 0xB0, 100, 0), (0.0, 0xB0, 6, 7), (0.0, 0xB0, 101, 127), (0.0, 0xB0, 100, 127)]
    y = render_events(rpn + [(0.0, 0xE0, 0x7F, 0x7F), (0.0, 0x90, 57, 110), (1.0, 0x80, 57, 0)], s, FS, 256,
                      tail_cap_s=0.0)
    expected = 220.0 * 2 ** (7 * (8191 / 8192) / 12)
    assert peak_frequency_hz(y[2400:40800], FS, expected, 20) == pytest.approx(expected, abs=0.1)
    y2 = render_events([(0.0, 0xE0, 0x7F, 0x7F), (0.0, 0x90, 57, 110), (1.0, 0x80, 57, 0)], s, FS, 256,
                       tail_cap_s=0.0)
    default = 220.0 * 2 ** (2 * (8191 / 8192) / 12)  # default range +-2 semitones
    assert peak_frequency_hz(y2[2400:40800], FS, default, 10) == pytest.approx(default, abs=0.1)


def test_full_pool_steals_the_quietest_voice():
    s = clean(voices=2)
    engine = Engine(s, FS, 256)
    engine.render([(0, 0x90, 60, 30), (10, 0x90, 64, 120), (20, 0x90, 67, 120)])
    for _ in range(10):
        engine.render()
    assert engine.stats.stolen == 1
    notes = sorted(int(n) for n in engine.pool.note[: engine.pool.n_active])
    assert notes == [64, 67]  # the quiet one faded out and retired


def test_a_burst_of_quiet_notes_does_not_steal_a_loud_held_one():
    # Stealing takes the quietest voice (common practice), also when the candidates were started
    # in the same block as the note that needs a voice: a flood of soft notes steals among itself.
    # Open rule: 40 notes at once, some below the six-string's E2 (a fretted neck sounds six at most).
    engine = Engine(clean_open(voices=16), FS, 256)
    engine.render([(0, 0xBF, 64, 127), (0, 0x9F, 45, 127)])  # pedal down, a loud note on channel 16
    for _ in range(4):
        engine.render()
    engine.render([(i % 256, 0x90, 50 + i % 40, 10 + i % 7) for i in range(40)])
    for _ in range(10):
        engine.render()
    pool = engine.pool
    held = [v for v in range(pool.n_active) if pool.channel[v] == 15 and pool.note[v] == 45]
    assert held and pool.state[held[0]] in (HELD, SOUNDING)
    assert engine.stats.stolen >= 40 - 16


def test_a_voice_count_change_rebuilds_the_pool_and_notes_play_after_it():
    # After the pool is rebuilt for a new voice and mode count, note 69 still sounds at 440 Hz
    # (MIDI 1.0 note numbers, ISO 16 tuning).
    s = Settings.defaults().with_values({"voices": 16, "string.modes": 96})
    engine = Engine(s, FS, 256)
    engine.render([(0, 0x90, 60, 100)])
    engine.apply_settings(s.with_values({"voices": 32, "string.modes": 128}))
    for _ in range(50):
        engine.render()
    assert engine.pool.modes == 128 and engine.voices == 32
    out = np.concatenate([engine.render([(0, 0x90, 69, 100)]).copy()] + [engine.render().copy() for _ in range(40)])
    assert peak_frequency_hz(out[2400:], FS, 440.0, 20.0) == pytest.approx(440.0, abs=0.5)


def test_repluck_has_no_click():
    # A re-pluck fades the old vibration over ~20 ms: the jump at the re-pluck is no larger than a fresh
    # pluck's own onset (a displacement pickup sees the released shape at once, from silence).
    s = clean(pickup__0__sensing="displacement")
    first = render_events([(0.0, 0x90, 60, 100)], s, FS, 256, tail_cap_s=0.01)
    again = render_events([(0.0, 0x90, 60, 100), (0.5, 0x90, 60, 100)], s, FS, 256, tail_cap_s=0.01)
    jump_fresh = np.max(np.abs(np.diff(np.concatenate([[0.0], first[:200]]))))
    at = int(0.5 * FS)
    jump_again = np.max(np.abs(np.diff(again[at - 5 : at + 200])))
    assert jump_again <= 1.3 * jump_fresh


def test_decayed_voices_retire():
    s = clean(string__t60_low=0.3, string__t60_high=0.1, string__release=0.1)
    engine = Engine(s, FS, 256)
    engine.render([(0, 0x90, 48, 127), (0, 0x90, 55, 127)])
    for _ in range(int(1.5 * FS / 256)):
        engine.render()
    assert engine.pool.n_active == 0


def test_long_sustain_does_not_drift():
    # The modal state is advanced in double precision: after 60 s the phase and level of a mode still
    # match exp((-sigma + i w) t) computed directly (to 1e-9 relative).
    # Open rule: the mode is at 440 Hz exactly, B = 0 from string.inharmonicity (a fretted voice takes
    # its string's B, which puts its first mode at f0 sqrt(1 + B)).
    s = clean_open(string__t60_low=60.0, string__t60_high=60.0, string__inharmonicity=0.0)
    engine = Engine(s, FS, 256)
    engine.render([(0, 0x90, 69, 127)])
    s0 = engine.pool.s[0, 0]  # state at the end of the first block
    blocks = int(60 * FS / 256)
    for _ in range(blocks):
        engine.render()
    n = blocks * 256
    sigma = LN1000 / 60.0
    expected = s0 * np.exp((-sigma + 2j * np.pi * 440.0) * n / FS)
    assert abs(engine.pool.s[0, 0] - expected) / abs(expected) < 1e-9


def test_long_sustain_audio_follows_the_double_precision_state():
    # The block coefficients are advanced in single precision between resyncs: after 60 s the block
    # must still be Re(sum_m g_m s_m p_m^n) worked out here in double precision from the engine's
    # own mode state (the definition of the modal sum), to -120 dB of its level. Never resynced, the
    # advance was off by 2.6e-4 of it by then (measured).
    s = clean(string__t60_low=60.0, string__t60_high=60.0)
    engine = Engine(s, FS, 256)
    engine.render([(0, 0x90, 57, 127)])
    for _ in range(int(60 * FS / 256)):
        engine.render()
    pool = engine.pool
    n = np.arange(256)
    expected = np.real((pool.gf[0] * pool.s[0]) @ (pool.p[0][:, None] ** n[None, :]))
    got = np.concatenate([engine.render().copy(), engine.render()])[LATENCY : LATENCY + 256]
    assert np.abs(expected).max() > 1e-4  # -60 dB after one T60, as it should be
    np.testing.assert_allclose(got, expected, rtol=0, atol=1e-6 * np.abs(expected).max())


def test_pickup_move_while_ringing_is_smooth():
    # A live pickup move is smoothed and ramped: no sample-to-sample step beyond the signal's own slew.
    # The move goes as far toward the neck as the default neck allows, from 0.15 to 0.27 of the scale
    # (97 to 175 mm; the 22nd fret is at 181.8 mm by the 12-TET fret rule, common practice).
    s = clean(pickup__0__sensing="displacement", pickup__0__position=0.15)
    engine = Engine(s, FS, 256)
    out = [engine.render([(0, 0x90, 45, 100)]).copy()]
    for i in range(40):
        if i == 10:
            engine.set_value("pickup.0.position", 0.27)
        out.append(engine.render().copy())
    y = np.concatenate(out)
    steady = np.max(np.abs(np.diff(y[1000:2560])))
    assert np.max(np.abs(np.diff(y[2560:]))) <= 1.5 * steady


def test_output_never_exceeds_the_ceiling_when_slammed():
    s = Settings.defaults().with_values({"output.gain_db": 12.0, "voices": 32})
    engine = Engine(s, FS, 128)
    peak = 0.0
    for i in range(200):
        events = [(j * 4, 0x90, 30 + (i * 7 + j) % 60, 127) for j in range(8)] if i % 3 == 0 else []
        y = engine.render(events)
        assert np.all(np.isfinite(y)), f"block {i}: {nonfinite(y)}"
        peak = max(peak, float(np.max(np.abs(y))))
    assert peak <= CEILING
    assert peak > 0.8  # the limiter was really working at the ceiling


def test_partial_bent_past_the_cut_off_falls_silent_and_returns_when_the_bend_does():
    # Partials stop at 0.45 fs (our cut-off below Nyquist, common practice against aliasing). A bend
    # changes a mode's frequency, not its vibration, so a partial pushed past the cut-off is silent
    # while there and comes back on return with the level its decay predicts (Chaigne & Askenfelt
    # 1994 loss law, as in damping()).
    # Open rule: note 105 lies above the six-string's highest (86), and the partials are harmonic.
    s = clean_open(string__inharmonicity=0.0, pickup__0__sensing="displacement", string__t60_high=7.5)
    f0, k_top = 3520.0, 6  # note 105; 6 x 3520 = 21120 Hz, just under 0.45 x 48000 = 21600 Hz
    centre = (0x00, 0x40)
    events = [(0.0, 0x90, 105, 120), (0.3, 0xE0, 0x7F, 0x7F), (0.6, 0xE0, *centre), (1.0, 0x80, 105, 0)]
    y = render_events(events, s, FS, 256, tail_cap_s=0.0)
    freqs = f0 * np.arange(1, k_top + 1)
    sig = damping(freqs, 8.0, 7.5)  # nearly flat, so the top partial lasts the whole test

    def amplitudes_at(t0):
        start = int(t0 * FS)
        return fit_damped_modes(y[start:start + 9600], FS, freqs, sig)

    before, after = amplitudes_at(0.05), amplitudes_at(0.65)
    assert db(before[-1]) > db(before[0]) - 40  # the top partial is clearly there before the bend
    expected = np.abs(before) * np.exp(-sig * 0.6)
    present = db(expected) > -150  # partial 5 sits on the pluck's null at 0.2 (Fletcher & Rossing 1998)
    assert present[-1]
    np.testing.assert_allclose(db(after[present]), db(expected[present]), atol=0.3)
    # While bent up two semitones (default range) the top partial would sit near 23.7 kHz: silent.
    bent = y[int(0.35 * FS):int(0.35 * FS) + 9600] * np.hanning(9600)
    spec = np.abs(np.fft.rfft(bent))
    hz = np.fft.rfftfreq(9600, 1 / FS)
    top = k_top * f0 * 2 ** (2 * (8191 / 8192) / 12)
    assert db(spec[np.abs(hz - top) < 200].max()) < db(spec.max()) - 100


def test_a_live_pluck_change_shapes_the_next_note_and_leaves_the_ringing_one_alone():
    # Excitation parameters act on the next note (the host issue's rule): the ringing note keeps
    # the pluck it was born with, the next one has the new pluck's harmonics (Fletcher & Rossing 1998).
    # Open rule: the formulas take the pluck as a fraction of the note's own length, at the middle.
    s = clean_open(string__inharmonicity=0.0, excitation__position=0.2, pickup__0__position=0.15,
              pickup__0__sensing="displacement")
    engine = Engine(s, FS, 256)
    first = [engine.render([(0, 0x90, 57, 127)]).copy()]
    engine.set_value("excitation.position", 0.5)
    first += [engine.render().copy() for _ in range(40)]
    x = np.concatenate(first)[LATENCY : LATENCY + 9600]
    k = np.arange(1, 25)
    f = 220.0 * k
    c = fit_damped_modes(x, FS, f, damping(f))
    expected = predicted_levels(k, 0.2, 0.15, "displacement")
    audible = expected > expected.max() * 10 ** (-50 / 20)
    np.testing.assert_allclose(db(c[audible]), db(expected[audible]), atol=0.5)
    engine.render([(0, 0xB0, 120, 0)])  # all sound off, then a fresh note on another pitch
    for _ in range(40):
        engine.render()
    second = np.concatenate([engine.render([(0, 0x90, 45, 127)]).copy()] + [engine.render().copy() for _ in range(40)])
    f = 110.0 * k
    c = fit_damped_modes(second[LATENCY : LATENCY + 9600], FS, f, damping(f))
    expected = predicted_levels(k, 0.5, 0.15, "displacement")
    audible = expected > expected.max() * 10 ** (-50 / 20)
    assert not audible[1::2].any()  # a pluck at the middle has no even harmonics
    np.testing.assert_allclose(db(c[audible]), db(expected[audible]), atol=0.5)


def test_a_dense_block_of_events_renders_as_if_each_had_its_own_block():
    # Within a block, events are decided in order and then rendered together (see Engine.render).
    # With one-sample blocks every event is alone in its block; both must give the same audio to
    # float32 rounding, through re-plucks, releases, the sustain pedal and voice stealing. (Stealing
    # compares voice levels as they stood at the block's start, and a voice started in the same
    # block counts as loudest; so the steal here takes a voice from an earlier block, where both
    # renderings choose alike.)
    s = clean(voices=4, string__release=0.05)
    t = lambda n: n / FS  # noqa: E731 - sample times
    events = [(t(3), 0x90, 52, 100), (t(7), 0x90, 55, 90), (t(7), 0x90, 59, 80), (t(11), 0x90, 62, 40),
              (t(20), 0x80, 55, 0), (t(23), 0x90, 55, 100), (t(40), 0xB0, 64, 127), (t(41), 0x80, 52, 0),
              (t(300), 0x90, 64, 90), (t(302), 0x80, 64, 0), (t(330), 0xB0, 64, 0), (t(340), 0x90, 52, 60),
              (t(341), 0x80, 59, 0), (t(360), 0xB0, 123, 0), (t(4800), 0xE0, 0x00, 0x40)]
    ref = render_events(events, s, FS, 1, tail_cap_s=0.0)[:4800]
    for block in (128, 256):
        y = render_events(events, s, FS, block, tail_cap_s=0.0)[:4800]
        np.testing.assert_allclose(y[:1400], ref[:1400], atol=2e-6)
        # Later, fading voices retire once under -100 dBFS (RETIRE_LEVEL), checked every 10 ms at a
        # block boundary, so the moment differs with the block size by up to that level.
        np.testing.assert_allclose(y, ref, atol=RETIRE_LEVEL)


def test_an_offline_render_is_the_engines_output_with_its_fixed_delay_taken_off():
    s = clean()
    events = [(0.0, 0x90, 57, 110), (0.05, 0x80, 57, 0)]
    offline = render_events(events, s, FS, 256, tail_cap_s=0.2)
    engine = Engine(s, FS, 256)
    live = np.concatenate([engine.render([(0, 0x90, 57, 110)]).copy()]
                          + [engine.render([(2400 - 256 * i, 0x80, 57, 0)] if 256 * i <= 2400 < 256 * (i + 1)
                                           else []).copy() for i in range(1, offline.size // 256 + 3)])
    assert LATENCY > 0
    np.testing.assert_array_equal(offline, live[LATENCY: LATENCY + offline.size])
