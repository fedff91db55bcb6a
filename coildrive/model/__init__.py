"""Physics of a switched RL coil: closed-form segments, PWM steady state, heating.

Nothing here knows about files, CLIs or serial ports. Every function takes and returns
SI floats or numpy arrays that broadcast against each other, so a whole set of
operating points (corners, Monte Carlo samples, sweep points) is evaluated at once.
"""
