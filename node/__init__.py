"""veer.node"""
