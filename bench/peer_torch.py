"""PyTorch side of bench/peer.sh: the same network on the same kind of data.

Default symtrust architecture: three unpadded convolutions (16, 32, 64 channels;
kernels 5, 5, 3) each with ReLU and 2x2 max pooling, a 128-unit hidden layer,
dropout 0.25, 4 output classes, on a 100 x 100 window. Modes mirror
`trainer/examples/peer_bench.rs` and print one JSON line each:

  train  WINDOW BATCH STEPS           training samples per second (AdamW)
  sweep  WIDTH HEIGHT STRIDE SUBSET   fully-convolutional sheet sweep, tiled like
                                      ours (64 x 64 native cells per tile), plus
                                      per-window classification of SUBSET windows
"""

import json
import sys
import time

import torch
import torch.nn as nn
import torch.nn.functional as F

WINDOW = 100
NATIVE = 8
TILE_CELLS = 64


class Net(nn.Module):
    def __init__(self, window=WINDOW, classes=4):
        super().__init__()
        self.convs = nn.ModuleList(
            [nn.Conv2d(1, 16, 5), nn.Conv2d(16, 32, 5), nn.Conv2d(32, 64, 3)]
        )
        side = window
        for k in (5, 5, 3):
            side = (side - k + 1) // 2
        self.side = side
        self.hidden = nn.Linear(64 * side * side, 128)
        self.drop = nn.Dropout(0.25)
        self.out = nn.Linear(128, classes)

    def features(self, x):
        for c in self.convs:
            x = F.max_pool2d(F.relu(c(x)), 2)
        return x

    def forward(self, x):
        h = F.relu(self.hidden(self.features(x).flatten(1)))
        return self.out(self.drop(h))

    def dense_as_conv(self, x):
        f = self.features(x)
        hk = self.hidden.weight.view(128, 64, self.side, self.side)
        h = F.relu(F.conv2d(f, hk, self.hidden.bias))
        ok = self.out.weight.view(self.out.out_features, 128, 1, 1)
        return F.conv2d(h, ok, self.out.bias)


def sheet(width, height, gen):
    px = torch.ones(height, width)
    n = width * height // 4000
    xs = torch.randint(0, width, (n,), generator=gen)
    ys = torch.randint(0, height, (n,), generator=gen)
    lens = torch.randint(20, 220, (n,), generator=gen)
    hor = torch.rand(n, generator=gen) < 0.5
    for x, y, l, h in zip(xs.tolist(), ys.tolist(), lens.tolist(), hor.tolist()):
        if h:
            px[y, x : x + l] = 0
        else:
            px[y : y + l, x] = 0
    return 1.0 - px  # ink = 1, paper = 0


def main():
    torch.set_num_threads(2)
    torch.manual_seed(1)
    gen = torch.Generator().manual_seed(2)
    mode = sys.argv[1]
    info = {"torch": torch.__version__, "threads": torch.get_num_threads()}
    if mode == "train":
        window, batch, steps = map(int, sys.argv[2:5])
        net = Net(window)
        opt = torch.optim.AdamW(net.parameters(), lr=1e-3, weight_decay=1e-4)
        xs = (torch.rand(steps, batch, 1, window, window, generator=gen) < 0.1).float()
        ys = torch.randint(0, 4, (steps, batch), generator=gen)
        net.train()
        t = time.perf_counter()
        for i in range(steps):
            opt.zero_grad()
            loss = F.cross_entropy(net(xs[i]), ys[i])
            loss.backward()
            opt.step()
        secs = time.perf_counter() - t
        info.update(mode="train", window=window, batch=batch, steps=steps, seconds=secs,
                    samples_per_s=batch * steps / secs)
    elif mode == "sweep":
        width, height, stride, subset = map(int, sys.argv[2:6])
        net = Net().eval()
        img = sheet(width, height, gen)
        cols, rows = (width - WINDOW) // stride + 1, (height - WINDOW) // stride + 1
        t = time.perf_counter()
        with torch.no_grad():
            for dy in range(0, NATIVE, stride):
                for dx in range(0, NATIVE, stride):
                    pc = (width - dx - WINDOW) // NATIVE + 1
                    pr = (height - dy - WINDOW) // NATIVE + 1
                    for r0 in range(0, pr, TILE_CELLS):
                        for c0 in range(0, pc, TILE_CELLS):
                            tr, tc = min(TILE_CELLS, pr - r0), min(TILE_CELLS, pc - c0)
                            y0, x0 = dy + r0 * NATIVE, dx + c0 * NATIVE
                            h, w = NATIVE * (tr - 1) + WINDOW, NATIVE * (tc - 1) + WINDOW
                            tile = img[y0 : y0 + h, x0 : x0 + w].reshape(1, 1, h, w)
                            F.softmax(net.dense_as_conv(tile)[:, :, :tr, :tc], dim=1)
        sweep = time.perf_counter() - t
        r = torch.randint(0, rows, (subset,), generator=gen)
        c = torch.randint(0, cols, (subset,), generator=gen)
        wins = torch.stack([img[y * stride : y * stride + WINDOW, x * stride : x * stride + WINDOW]
                            for y, x in zip(r.tolist(), c.tolist())]).unsqueeze(1)
        t = time.perf_counter()
        with torch.no_grad():
            for chunk in wins.split(64):
                F.softmax(net(chunk), dim=1)
        per_window = (time.perf_counter() - t) / subset
        info.update(mode="sweep", width=width, height=height, stride=stride, cells=rows * cols,
                    sweep_seconds=sweep, per_window_seconds=per_window,
                    per_window_full_seconds_est=per_window * rows * cols,
                    ratio=per_window * rows * cols / sweep)
    else:
        sys.exit("usage: peer_torch.py train WINDOW BATCH STEPS | sweep WIDTH HEIGHT STRIDE SUBSET")
    print(json.dumps(info))


if __name__ == "__main__":
    main()
