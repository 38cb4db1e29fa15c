//! One LSTM direction as a single operation of the tensor library, with its own backward pass
//! (backpropagation through time).
//!
//! Unrolled step by step in the library's autograd, a sequence of T steps leaves T products with
//! the recurrent weights in the graph, and the backward pass allocates and sums T weight-sized
//! gradients (measured: three quarters of a training step went to zeroing freshly allocated
//! pages for them). Here the forward pass keeps the gate activations, and the backward pass
//! computes the weight gradient as one product over all steps, Σ_t h_{t-1}ᵀ δ_t.
//!
//! Input: the pre-activations of every step, `x_t·W + b`, shaped `(steps, batch, 4·hidden)`
//! (one product outside, before the recurrence), gates in the order input, forget, output,
//! candidate; and the recurrent weights `(hidden, 4·hidden)`. Output: `(steps, batch,
//! 6·hidden)`, per step and sentence `[h | c | i | f | o | g]` — the state and what the
//! backward pass needs; callers read the first `hidden` columns.

use candle_core::{CpuStorage, CustomOp2, DType, Device, Layout, Result, Shape, Tensor, WithDType};
use num_traits::Float;

/// The recurrence of one LSTM direction from a zero state.
#[derive(Debug, Clone, Copy)]
pub struct Recurrence;

fn contiguous<'a, T>(values: &'a [T], layout: &Layout) -> Result<&'a [T]> {
    match layout.contiguous_offsets() {
        Some((start, end)) => Ok(&values[start..end]),
        None => candle_core::bail!("lstm recurrence: inputs must be contiguous"),
    }
}

fn sigmoid<F: Float>(x: F) -> F {
    F::one() / (F::one() + (-x).exp())
}

/// `a (rows × inner) · b (inner × cols)` through the library's matrix product.
fn product<F: WithDType>(a: &[F], rows: usize, b: &Tensor) -> Result<Vec<F>> {
    let inner = b.dim(0)?;
    Tensor::from_slice(a, (rows, inner), &Device::Cpu)?
        .matmul(b)?
        .flatten_all()?
        .to_vec1()
}

fn forward<F: WithDType + Float>(
    pre: &[F],
    shape: (usize, usize, usize),
    recurrent: &Tensor,
) -> Result<Vec<F>> {
    let (steps, batch, four) = shape;
    let h_dim = four / 4;
    let width = 6 * h_dim;
    let mut out = vec![F::zero(); steps * batch * width];
    let mut h = vec![F::zero(); batch * h_dim];
    let mut c = vec![F::zero(); batch * h_dim];
    for t in 0..steps {
        let recurrent_part = product(&h, batch, recurrent)?;
        for b in 0..batch {
            let gates = &pre[(t * batch + b) * four..(t * batch + b + 1) * four];
            let from_h = &recurrent_part[b * four..(b + 1) * four];
            let row = &mut out[(t * batch + b) * width..(t * batch + b + 1) * width];
            for k in 0..h_dim {
                let i = sigmoid(gates[k] + from_h[k]);
                let f = sigmoid(gates[h_dim + k] + from_h[h_dim + k]);
                let o = sigmoid(gates[2 * h_dim + k] + from_h[2 * h_dim + k]);
                let g = (gates[3 * h_dim + k] + from_h[3 * h_dim + k]).tanh();
                let cell = f * c[b * h_dim + k] + i * g;
                let hidden = o * cell.tanh();
                c[b * h_dim + k] = cell;
                h[b * h_dim + k] = hidden;
                row[k] = hidden;
                row[h_dim + k] = cell;
                row[2 * h_dim + k] = i;
                row[3 * h_dim + k] = f;
                row[4 * h_dim + k] = o;
                row[5 * h_dim + k] = g;
            }
        }
    }
    Ok(out)
}

/// Gradients of the pre-activations and of the recurrent weights, from the saved activations
/// and the gradient of the outputs' `h` columns.
fn backward<F: WithDType + Float>(
    saved: &[F],
    grad_out: &[F],
    shape: (usize, usize, usize),
    recurrent: &Tensor,
) -> Result<(Vec<F>, Vec<F>)> {
    let (steps, batch, width) = shape;
    let h_dim = width / 6;
    let four = 4 * h_dim;
    let recurrent_t = recurrent.t()?.contiguous()?;
    let mut d_pre = vec![F::zero(); steps * batch * four];
    let mut dh_next = vec![F::zero(); batch * h_dim];
    let mut dc_next = vec![F::zero(); batch * h_dim];
    for t in (0..steps).rev() {
        for b in 0..batch {
            let row = &saved[(t * batch + b) * width..(t * batch + b + 1) * width];
            let grad = &grad_out[(t * batch + b) * width..(t * batch + b) * width + h_dim];
            let d = &mut d_pre[(t * batch + b) * four..(t * batch + b + 1) * four];
            for k in 0..h_dim {
                let (cell, i, f, o, g) = (
                    row[h_dim + k],
                    row[2 * h_dim + k],
                    row[3 * h_dim + k],
                    row[4 * h_dim + k],
                    row[5 * h_dim + k],
                );
                let previous_cell = if t == 0 {
                    F::zero()
                } else {
                    saved[((t - 1) * batch + b) * width + h_dim + k]
                };
                let dh = grad[k] + dh_next[b * h_dim + k];
                let tanh_cell = cell.tanh();
                let d_o = dh * tanh_cell;
                let dc = dh * o * (F::one() - tanh_cell * tanh_cell) + dc_next[b * h_dim + k];
                let d_i = dc * g;
                let d_g = dc * i;
                let d_f = dc * previous_cell;
                dc_next[b * h_dim + k] = dc * f;
                d[k] = d_i * i * (F::one() - i);
                d[h_dim + k] = d_f * f * (F::one() - f);
                d[2 * h_dim + k] = d_o * o * (F::one() - o);
                d[3 * h_dim + k] = d_g * (F::one() - g * g);
            }
        }
        dh_next = product(
            &d_pre[t * batch * four..(t + 1) * batch * four],
            batch,
            &recurrent_t,
        )?;
    }
    // dW = Σ_t h_{t-1}ᵀ · δ_t, as one product: (hidden × steps·batch) · (steps·batch × 4·hidden).
    let mut previous_h = vec![F::zero(); steps * batch * h_dim];
    for t in 1..steps {
        for b in 0..batch {
            let from = ((t - 1) * batch + b) * width;
            previous_h[(t * batch + b) * h_dim..(t * batch + b + 1) * h_dim]
                .copy_from_slice(&saved[from..from + h_dim]);
        }
    }
    let d_recurrent = Tensor::from_slice(&previous_h, (steps * batch, h_dim), &Device::Cpu)?
        .t()?
        .matmul(&Tensor::from_slice(
            &d_pre,
            (steps * batch, four),
            &Device::Cpu,
        )?)?
        .flatten_all()?
        .to_vec1()?;
    Ok((d_pre, d_recurrent))
}

/// [`backward`] on tensors: the gradients shaped as the pre-activations and the recurrent
/// weights.
fn backward_tensors<F: WithDType + Float>(
    res: &Tensor,
    grad_res: &Tensor,
    shape: (usize, usize, usize),
    recurrent: &Tensor,
) -> Result<(Tensor, Tensor)> {
    let (steps, batch, width) = shape;
    let h_dim = width / 6;
    let (d_pre, d_recurrent) = backward::<F>(
        &res.flatten_all()?.to_vec1()?,
        &grad_res.flatten_all()?.to_vec1()?,
        shape,
        recurrent,
    )?;
    Ok((
        Tensor::from_vec(d_pre, (steps, batch, 4 * h_dim), &Device::Cpu)?,
        Tensor::from_vec(d_recurrent, (h_dim, 4 * h_dim), &Device::Cpu)?,
    ))
}

impl CustomOp2 for Recurrence {
    fn name(&self) -> &'static str {
        "lstm-recurrence"
    }

    fn cpu_fwd(
        &self,
        s1: &CpuStorage,
        l1: &Layout,
        s2: &CpuStorage,
        l2: &Layout,
    ) -> Result<(CpuStorage, Shape)> {
        let (steps, batch, four) = l1.shape().dims3()?;
        let (h_dim, four_again) = l2.shape().dims2()?;
        if four != 4 * h_dim || four_again != four {
            candle_core::bail!(
                "lstm recurrence: pre-activations {:?} do not fit recurrent weights {:?}",
                l1.shape(),
                l2.shape()
            );
        }
        let out_shape = Shape::from((steps, batch, 6 * h_dim));
        match (s1, s2) {
            (CpuStorage::F32(pre), CpuStorage::F32(w)) => {
                let w = Tensor::from_slice(contiguous(w, l2)?, (h_dim, four), &Device::Cpu)?;
                let out = forward(contiguous(pre, l1)?, (steps, batch, four), &w)?;
                Ok((CpuStorage::F32(out), out_shape))
            }
            (CpuStorage::F64(pre), CpuStorage::F64(w)) => {
                let w = Tensor::from_slice(contiguous(w, l2)?, (h_dim, four), &Device::Cpu)?;
                let out = forward(contiguous(pre, l1)?, (steps, batch, four), &w)?;
                Ok((CpuStorage::F64(out), out_shape))
            }
            _ => candle_core::bail!("lstm recurrence: f32 or f64 inputs of one type"),
        }
    }

    fn bwd(
        &self,
        _pre: &Tensor,
        recurrent: &Tensor,
        res: &Tensor,
        grad_res: &Tensor,
    ) -> Result<(Option<Tensor>, Option<Tensor>)> {
        let shape = res.dims3()?;
        let recurrent = recurrent.detach();
        let (d_pre, d_recurrent) = match res.dtype() {
            DType::F32 => backward_tensors::<f32>(res, grad_res, shape, &recurrent)?,
            DType::F64 => backward_tensors::<f64>(res, grad_res, shape, &recurrent)?,
            other => candle_core::bail!("lstm recurrence: no backward for {other:?}"),
        };
        Ok((Some(d_pre), Some(d_recurrent)))
    }
}
