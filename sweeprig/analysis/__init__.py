"""sweeprig.analysis"""
