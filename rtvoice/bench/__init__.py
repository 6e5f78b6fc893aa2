"""``rtvoice bench``: what the engine costs, beside the machine's limit and the published alternatives.

Everything is measured in one run on one core, side by side, because absolute
times on a shared machine drift from run to run:

- :mod:`.grid`: engine cost per block over voices x modes x block sizes, with every
  feature on (:mod:`.scenes`), and what idle voices cost;
- :mod:`.limits`: the bare single-precision complex products of the same shapes;
- :mod:`.baselines` and :mod:`.compare`: three plain numpy/scipy renderers of the same
  notes (two-pole resonators, phasor recursion, extended Karplus-Strong);
- :mod:`.songs`: the demo song (real-time blocks, offline speed), start-up time and
  memory per voice; :mod:`.realtime`: the host's callback under a JACK dummy server;
- :mod:`.profile`: where a block's time goes; :mod:`.machine`: what it ran on;
- :mod:`.runner` puts the figures together, :mod:`.report` prints them.
"""
