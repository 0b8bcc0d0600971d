"""PyTorch reference for train_bench: the identical training step on the
identical network (3-64-64-3 tanh MLP, batch 256, float32): forward, MSE,
backward, AdamW. Prints steps per second of each run, one per line.

usage: /usr/bin/python3 torch_train_step.py STEPS RUNS THREADS
"""
import sys
import time

import torch

steps, runs, threads = int(sys.argv[1]), int(sys.argv[2]), int(sys.argv[3])
torch.set_num_threads(threads)
torch.manual_seed(0)
net = torch.nn.Sequential(torch.nn.Linear(3, 64), torch.nn.Tanh(), torch.nn.Linear(64, 64), torch.nn.Tanh(),
                          torch.nn.Linear(64, 3))
opt = torch.optim.AdamW(net.parameters(), lr=1e-3, weight_decay=0.0)
x = torch.randn(256, 3)
y = torch.randn(256, 3)


def step():
    opt.zero_grad(set_to_none=True)
    loss = torch.nn.functional.mse_loss(net(x), y)
    loss.backward()
    opt.step()


for _ in range(200):  # warm-up
    step()
for _ in range(runs):
    t = time.perf_counter()
    for _ in range(steps):
        step()
    print(steps / (time.perf_counter() - t), flush=True)
