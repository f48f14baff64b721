"""Noise-floor and attenuation tests."""

import numpy as np

from sweeprig.analysis.validity import attenuation_test, clear_of_noise, in_noise, upper_bound_dbm


def test_in_noise_margin():
    level = np.array([-100.0, -94.1, -93.9, -50.0, -50.0])
    floor = np.array([-100.0, -100.0, -100.0, -100.0, np.nan])
    assert in_noise(level, floor).tolist() == [True, True, False, False, False]
    assert clear_of_noise(level, floor).tolist() == [False, False, False, True, True]
    assert upper_bound_dbm(np.array([-105.0]), np.array([-100.0])).tolist() == [-100.0]


def test_attenuation_test_tells_the_analyzer_from_the_part():
    # common practice, no source: with +10 dB attenuation a DUT product keeps its displayed
    # level while a 3rd-order product made in the analyzer's first mixer drops about 20 dB.
    product = np.array([-60.0, -60.0, -60.0, -60.0, -96.0])
    repeat = np.array([-60.2, -80.0, -80.0, -59.5, -88.0])
    carrier = np.full(5, -10.0)
    carrier_repeat = np.array([-10.1, -10.1, -11.0, -10.0, -10.0])
    floor = np.full(5, -100.0)
    repeat_floor = np.full(5, -90.0)
    distortion, moved = attenuation_test(
        product, repeat, carrier, carrier_repeat,
        product_floor_dbm=floor, product_atten_floor_dbm=repeat_floor,
    )
    # 0: steady (part's own); 1: dropped 20 dB, carrier steady → analyzer; 2: carrier moved
    # → test in doubt; 3: within 1 dB; 4: product in the noise to begin with → not tested
    assert distortion.tolist() == [False, True, False, False, False]
    assert moved.tolist() == [False, False, True, False, False]


def test_attenuation_test_ignores_a_rise_into_the_repeat_noise():
    distortion, _ = attenuation_test(
        np.array([-85.0]), np.array([-80.5]), np.array([-10.0]), np.array([-10.0]),
        product_floor_dbm=np.array([-100.0]), product_atten_floor_dbm=np.array([-82.0]),
    )
    assert not distortion[0]
    # without a carrier repeat the carrier is taken as steady
    distortion, moved = attenuation_test(
        np.array([-60.0]), np.array([-80.0]), np.array([-10.0]), np.array([np.nan])
    )
    assert distortion[0] and not moved[0]


def test_the_floor_rise_of_the_repeat_is_not_the_analyzers_distortion():
    """A product 12 dB above its floor reads 0.27 dB high from the noise in it (incoherent
    powers add: 10·log10(1 + 10^-1.2)); on the repeat's floor, 10 dB higher, it reads
    10·log10(1 + 10^-0.2) = 2.12 dB high: a rise of 1.85 dB that no analyzer made."""
    floor, repeat_floor = np.full(4, -112.0), np.full(4, -102.0)
    signal = -100.0
    product = np.full(4, 10 * np.log10(10 ** (signal / 10) + 10 ** (-112.0 / 10)))
    expected = 10 * np.log10(10 ** (signal / 10) + 10 ** (-102.0 / 10))
    assert abs((expected - product[0]) - 1.85) < 0.01
    repeat = np.array([
        expected,               # the part's product on the raised floor: not moved
        expected + 0.5,         # a sweep's fluctuation on top: not moved
        -96.0,                  # 4 dB up, 6 dB above its floor: too near the floor to count
        product[0] - 20.0,      # an analyzer-made product falling into the noise: moved
    ])
    carrier = np.full(4, -10.0)
    distortion, _ = attenuation_test(product, repeat, carrier, carrier,
                                     product_floor_dbm=floor,
                                     product_atten_floor_dbm=repeat_floor)
    assert distortion.tolist() == [False, False, False, True]


def test_a_rise_well_clear_of_the_floor_still_counts():
    """A repeat 3 dB up and 25 dB above its floor is not noise: the analyzer's product was
    cancelling the part's (coherent sum) and moved away with the attenuation."""
    distortion, _ = attenuation_test(np.array([-80.0]), np.array([-77.0]), np.array([-10.0]),
                                     np.array([-10.0]), product_floor_dbm=np.array([-112.0]),
                                     product_atten_floor_dbm=np.array([-102.0]))
    assert distortion.tolist() == [True]
