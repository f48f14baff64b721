"""sweeprig.plan"""
