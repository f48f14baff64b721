"""sweeprig.report"""
