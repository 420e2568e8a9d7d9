"""wirestate.report"""
