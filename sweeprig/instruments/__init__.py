"""sweeprig.instruments"""
