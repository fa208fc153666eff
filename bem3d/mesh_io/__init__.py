"""mesh_io"""
