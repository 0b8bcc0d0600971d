#!/usr/bin/python3
"""PyTorch reference for tests/learn/torch_reftest.cpp.

Usage: torch_step.py INPUT

INPUT is a text file written by the C++ test, one `key values...` per line:
  activation tanh|silu
  sizes      C h1 ... C          (network widths: in, hidden..., out)
  dt, mean, std, scale           (flow map G(x) = x + dt*S*N((x - m)/s))
  params     the flat parameter buffer in lyapcast's layout: per layer the
             weight (out x in) COLUMN-major, then the bias; then mu (C values)
  x, target  C*B values, column-major C x B (= row-major B x C, samples as rows)
  steps k    the loss is mse_loss(G^k(x), target)
  iterations, lr, beta1, beta2, eps, weight_decay, max_norm
  jacobian_at  C values

Each iteration: zero grads, forward, loss.backward(),
torch.nn.utils.clip_grad_norm_(params, max_norm), torch.optim.AdamW.step().
mu is not used by G; it gets an explicit zero gradient so AdamW still
applies weight decay to it, as lyapcast's optimizer does for every element.

Output, one `name count values...` per line (repr floats, exact round trip):
  loss, grad_norm   per iteration (before the step; norm before clipping)
  grads             first iteration's gradient (before clipping), flat layout
  dx                first iteration's dL/dx, column-major C x B
  params_1          parameters after the first step, flat layout
  params_n          parameters after the last step
  jacobian          dG/dx at jacobian_at (initial parameters), column-major
Prints `skip <reason>` and exits 0 if torch cannot be imported.
"""
import sys


def main():
    try:
        import torch
    except Exception as e:  # noqa: BLE001 - any import failure means "no reference here"
        print("skip", "cannot import torch under", sys.executable, ":", repr(e))
        return 0

    torch.set_default_dtype(torch.float64)
    torch.set_num_threads(1)

    fields = {}
    with open(sys.argv[1]) as f:
        for line in f:
            parts = line.split()
            if parts:
                fields[parts[0]] = parts[1:]

    def floats(key):
        return torch.tensor([float(v) for v in fields[key]], dtype=torch.float64)

    def scalar(key):
        return float(fields[key][0])

    sizes = [int(v) for v in fields["sizes"]]
    channels = sizes[0]
    dt = scalar("dt")
    m, s, S = floats("mean"), floats("std"), floats("scale")
    flat = floats("params")

    layers = []
    off = 0
    for n_in, n_out in zip(sizes[:-1], sizes[1:]):
        lin = torch.nn.Linear(n_in, n_out)
        with torch.no_grad():
            # Column-major (out x in) is row-major (in x out): transpose back.
            lin.weight.copy_(flat[off:off + n_in * n_out].view(n_in, n_out).t())
            off += n_in * n_out
            lin.bias.copy_(flat[off:off + n_out])
            off += n_out
        layers.append(lin)
    mu = torch.nn.Parameter(flat[off:off + channels].clone())
    assert off + channels == flat.numel(), "parameter count mismatch"

    act = torch.tanh if fields["activation"][0] == "tanh" else torch.nn.functional.silu

    def net(h):
        for i, lin in enumerate(layers):
            h = lin(h)
            if i + 1 < len(layers):
                h = act(h)
        return h

    def G(x):  # x: (B, C)
        return x + dt * S * net((x - m) / s)

    params = [p for lin in layers for p in (lin.weight, lin.bias)] + [mu]

    def flat_of(tensors):
        return torch.cat([t.detach().t().reshape(-1) if t.dim() == 2 else t.detach().reshape(-1) for t in tensors])

    def emit(name, values):
        values = [float(v) for v in values]
        print(name, len(values), " ".join(repr(v) for v in values))

    x0 = floats("x").view(-1, channels)
    target = floats("target").view(-1, channels)
    steps = int(scalar("steps"))

    jx = floats("jacobian_at")
    J = torch.autograd.functional.jacobian(lambda v: G(v.view(1, channels)).view(channels), jx)
    jacobian = J.t().reshape(-1)

    opt = torch.optim.AdamW(params, lr=scalar("lr"), betas=(scalar("beta1"), scalar("beta2")),
                            eps=scalar("eps"), weight_decay=scalar("weight_decay"))
    losses, norms = [], []
    for it in range(int(scalar("iterations"))):
        opt.zero_grad(set_to_none=True)
        x = x0.clone().requires_grad_(True)
        y = x
        for _ in range(steps):
            y = G(y)
        loss = torch.nn.functional.mse_loss(y, target)
        loss.backward()
        if mu.grad is None:
            mu.grad = torch.zeros_like(mu)
        if it == 0:
            emit("grads", flat_of([p.grad for p in params]))
            emit("dx", x.grad.reshape(-1))
        norms.append(float(torch.nn.utils.clip_grad_norm_(params, scalar("max_norm"))))
        losses.append(float(loss))
        opt.step()
        if it == 0:
            emit("params_1", flat_of(params))
    emit("params_n", flat_of(params))
    emit("loss", losses)
    emit("grad_norm", norms)
    emit("jacobian", jacobian)
    return 0


if __name__ == "__main__":
    sys.exit(main())
