"""The NEC cards a call sends (what the engine asks PyNEC for, not what it answers)."""

from nfmap import engine


def cards_sent(call):
    """``call()`` with every near-field card it sends kept: returns its result and the cards' arguments (PyNEC's
    ne_card / nh_card order: 0, nx, ny, nz, x0, y0, z0, dx, dy, dz)."""
    cards = []
    real = engine._Counter.card

    def card(self, kind, args):
        cards.append(args)
        return real(self, kind, args)

    engine._Counter.card = card
    try:
        return call(), cards
    finally:
        engine._Counter.card = real
