from .cli import entry

if __name__ == "__main__":  # not when multiprocessing's spawn imports it as __mp_main__
    entry()
