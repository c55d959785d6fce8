"""veer.tools"""
