// Every public function of sinew-runtime as an exported symbol, for `tests/tests/panic_free.rs`.
//
// The test copies this file into a `no_std` library crate (beside the generated modules), builds
// it for each device target at opt-level 2, 3, s and z, and follows every call out of each
// exported symbol in the object files: none may reach `core::panicking`. Each generic kernel is
// exported once for `f32` and once for `f64` (`kernels!` below), the const-generic array forms
// for three shapes: one input and one output, a short row (5 inputs, 3 outputs: the across-samples
// and inline-fold paths) and a long one (20 inputs, 17 outputs: the chunked paths); the
// sliding-window forms (`rt::conv`) for a 1-D and a 2-D map (`windowed!`, `pooled!`), with the
// geometry a parameter.
//
// `#[export_name]` is `#[no_mangle]` under a name built from the scalar: the symbol is global and
// always compiled. Methods are called in the `Type::method(..)` form, so that the test's
// completeness check (every `pub fn` of `runtime/src` named here as `Owner::name`) can find them.

use sinew_runtime as rt;
use sinew_runtime::act::Activation;
use sinew_runtime::blob::{BlobError, Values, Writer};
use sinew_runtime::conv::Window;
use sinew_runtime::penalty::Penalty;
use sinew_runtime::rng::SplitMix64;
use sinew_runtime::LengthMismatch;

/// The const-generic array forms for one shape `(I inputs, O outputs)`.
macro_rules! shaped {
    ($t:ty, $tag:literal, $i:literal, $o:literal) => {
        const _: () = {
            type T = $t;
            #[export_name = concat!("sinew_k_", $tag, "_affine_n_", $i, "x", $o)]
            fn affine_n(w: &[[T; $i]; $o], b: &[T; $o], x: &[T; $i], z: &mut [T; $o]) {
                rt::linalg::affine_n(w, b, x, z)
            }
            #[export_name = concat!("sinew_k_", $tag, "_back_n_", $i, "x", $o)]
            fn back_n(w: &[[T; $i]; $o], d: &[T; $o], out: &mut [T; $i]) {
                rt::linalg::back_n(w, d, out)
            }
            #[export_name = concat!("sinew_k_", $tag, "_outer_acc_n_", $i, "x", $o)]
            fn outer_acc_n(g: &mut [[T; $i]; $o], d: &[T; $o], a: &[T; $i]) {
                rt::linalg::outer_acc_n(g, d, a)
            }
            #[export_name = concat!("sinew_k_", $tag, "_standardize_n_", $i)]
            fn standardize_n(x: &[T; $i], mean: &[T; $i], std: &[T; $i], out: &mut [T; $i]) {
                rt::linalg::standardize_n(x, mean, std, out)
            }
            #[export_name = concat!("sinew_k_", $tag, "_affine_batch_n_", $i, "x", $o)]
            fn affine_batch_n(w: &[[T; $i]; $o], b: &[T; $o], xs: &[[T; $i]], zs: &mut [[T; $o]]) {
                rt::linalg::affine_batch_n(w, b, xs, zs)
            }
            #[export_name = concat!("sinew_k_", $tag, "_back_batch_n_", $i, "x", $o)]
            fn back_batch_n(w: &[[T; $i]; $o], ds: &[[T; $o]], outs: &mut [[T; $i]]) {
                rt::linalg::back_batch_n(w, ds, outs)
            }
            #[export_name = concat!("sinew_k_", $tag, "_outer_acc_batch_n_", $i, "x", $o)]
            fn outer_acc_batch_n(g: &mut [[T; $i]; $o], ds: &[[T; $o]], xs: &[[T; $i]]) {
                rt::linalg::outer_acc_batch_n(g, ds, xs)
            }
            #[export_name = concat!("sinew_k_", $tag, "_add_acc_n_", $o)]
            fn add_acc_n(g: &mut [T; $o], d: &[T; $o]) {
                rt::linalg::add_acc_n(g, d)
            }
            #[export_name = concat!("sinew_k_", $tag, "_add_acc_batch_n_", $o)]
            fn add_acc_batch_n(g: &mut [T; $o], ds: &[[T; $o]]) {
                rt::linalg::add_acc_batch_n(g, ds)
            }
            #[export_name = concat!("sinew_k_", $tag, "_act_grad_n_", $o)]
            fn act_grad_n(a: &[T; $o], d: &mut [[T; $o]; 6], alpha: T) {
                let [d0, d1, d2, d3, d4, d5] = d;
                rt::act::identity_grad_n(a, d0);
                rt::act::sigmoid_grad_n(a, d1);
                rt::act::tanh_grad_n(a, d2);
                rt::act::relu_grad_n(a, d3);
                rt::act::leaky_relu_grad_n(a, d4, alpha);
                rt::act::softmax_grad_n(a, d5);
            }
            #[export_name = concat!("sinew_k_", $tag, "_act_grad_batch_n_", $o)]
            fn act_grad_batch_n(a: &[[T; $o]], d: &mut [[T; $o]], alpha: T) {
                rt::act::sigmoid_grad_batch_n(a, d);
                rt::act::tanh_grad_batch_n(a, d);
                rt::act::relu_grad_batch_n(a, d);
                rt::act::leaky_relu_grad_batch_n(a, d, alpha);
            }
            #[export_name = concat!("sinew_k_", $tag, "_loss_n_", $o)]
            fn loss_n(z: &[T; $o], y: &[T; $o], a: &mut [T; $o], d: &mut [T; $o]) -> [T; 4] {
                rt::loss::output_error_n(z, y, d);
                [
                    rt::loss::logistic_cross_entropy_n(z, y),
                    rt::loss::softmax_cross_entropy_n(z, y),
                    rt::loss::squared_error_n(z, y),
                    rt::loss::softmax_with_cross_entropy_n(z, y, a),
                ]
            }
            #[export_name = concat!("sinew_k_", $tag, "_optim_n_", $i, "x", $o)]
            #[allow(clippy::too_many_arguments)]
            fn optim_n(
                p: &mut [[T; $i]; $o],
                g: &[[T; $i]; $o],
                m: &mut [[T; $i]; $o],
                v: &mut [[T; $i]; $o],
                pb: &mut [T; $o],
                gb: &[T; $o],
                vb: &mut [T; $o],
                t: u32,
                k: [T; 5],
            ) {
                let [rate, mu, beta1, beta2, eps] = k;
                rt::optim::sgd_n(p, g, rate);
                rt::optim::momentum_n(p, g, v, rate, mu);
                rt::optim::adam_n(p, g, m, v, t, rate, beta1, beta2, eps);
                rt::optim::sgd_n(pb, gb, rate);
                rt::optim::momentum_n(pb, gb, vb, rate, mu);
            }
            #[export_name = concat!("sinew_k_", $tag, "_penalty_finish_weights_n_", $i, "x", $o)]
            fn penalty_finish_weights_n(
                pen: &Penalty<T>,
                g: &mut [[T; $i]; $o],
                w: &[[T; $i]; $o],
                m: T,
            ) {
                Penalty::finish_weights_n(pen, g, w, m)
            }
            #[export_name = concat!("sinew_k_", $tag, "_softmax_cross_entropy_batch_n_", $o)]
            fn softmax_cross_entropy_batch_n(
                zs: &[[T; $o]],
                ys: &[[T; $o]],
                as_: &mut [[T; $o]],
                sum: T,
            ) -> T {
                rt::loss::softmax_cross_entropy_batch_n(zs, ys, as_, sum)
            }
        };
    };
}

/// The const-generic array forms of `conv` for one shape: convolution of `$f` filters of `$kc`
/// weights, depthwise of `$c` channels of `$k` taps, input of `$i` values, outputs of `$o` and
/// `$od`. The geometry is a parameter, as unknown to the optimiser as the slice forms' lengths.
macro_rules! windowed {
    ($t:ty, $tag:literal, $name:literal, $kc:literal, $f:literal, $k:literal, $c:literal, $i:literal, $o:literal, $od:literal) => {
        const _: () = {
            type T = $t;
            #[export_name = concat!("sinew_k_", $tag, "_conv_n_", $name)]
            fn conv_n(w: &[[T; $kc]; $f], b: &[T; $f], x: &[T; $i], out: &mut [T; $o], g: &Window) {
                rt::conv::conv_n(w, b, x, out, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_conv_acc_n_", $name)]
            fn conv_acc_n(
                gw: &mut [[T; $kc]; $f],
                gb: &mut [T; $f],
                err: &[T; $o],
                x: &[T; $i],
                g: &Window,
            ) {
                rt::conv::conv_acc_n(gw, gb, err, x, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_conv_back_n_", $name)]
            fn conv_back_n(w: &[[T; $kc]; $f], err: &[T; $o], dx: &mut [T; $i], g: &Window) {
                rt::conv::conv_back_n(w, err, dx, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_depthwise_n_", $name)]
            fn depthwise_n(
                w: &[[T; $k]; $c],
                b: &[T; $c],
                x: &[T; $i],
                out: &mut [T; $od],
                g: &Window,
            ) {
                rt::conv::depthwise_n(w, b, x, out, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_depthwise_acc_n_", $name)]
            fn depthwise_acc_n(
                gw: &mut [[T; $k]; $c],
                gb: &mut [T; $c],
                err: &[T; $od],
                x: &[T; $i],
                g: &Window,
            ) {
                rt::conv::depthwise_acc_n(gw, gb, err, x, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_depthwise_back_n_", $name)]
            fn depthwise_back_n(w: &[[T; $k]; $c], err: &[T; $od], dx: &mut [T; $i], g: &Window) {
                rt::conv::depthwise_back_n(w, err, dx, g)
            }
        };
    };
}

/// The const-generic array forms of the pooling kernels for an input of `$i` values and an
/// output of `$o`.
macro_rules! pooled {
    ($t:ty, $tag:literal, $i:literal, $o:literal) => {
        const _: () = {
            type T = $t;
            #[export_name = concat!("sinew_k_", $tag, "_pool_n_", $i, "x", $o)]
            fn pool_n(
                x: &[T; $i],
                err: &[T; $o],
                out: &mut [[T; $o]; 2],
                dx: &mut [[T; $i]; 2],
                g: &Window,
            ) {
                let [max, average] = out;
                let [dmax, daverage] = dx;
                rt::conv::pool_max_n(x, max, g);
                rt::conv::pool_average_n(x, average, g);
                rt::conv::pool_max_back_n(x, err, dmax, g);
                rt::conv::pool_average_back_n(err, daverage, g);
            }
        };
    };
}

/// Every generic kernel for the scalar `$t`, exported as `sinew_k_<$tag>_<name>`.
macro_rules! kernels {
    ($t:ty, $tag:literal) => {
        shaped!($t, $tag, 1, 1);
        shaped!($t, $tag, 5, 3);
        shaped!($t, $tag, 20, 17);
        // conv: a 1-D window of 8 steps x 2 channels (3 filters, kernel 3: 6 positions; pooling
        // by 2: 4) and a 2-D map of 4 x 4 x 2 (2 filters, 3 x 3: 16 positions; pooling 2 x 2: 4).
        windowed!($t, $tag, "line", 6, 3, 3, 2, 16, 18, 12);
        windowed!($t, $tag, "square", 18, 2, 9, 2, 32, 32, 32);
        pooled!($t, $tag, 16, 8);
        pooled!($t, $tag, 32, 8);
        const _: () = {
            type T = $t;

            // reference: the contract
            #[export_name = concat!("sinew_k_", $tag, "_reference_linalg")]
            #[allow(clippy::too_many_arguments)]
            fn reference_linalg(
                w: &[T],
                b: &[T],
                x: &[T],
                z: &mut [T],
                g: &mut [T],
                n: usize,
                rows: (usize, usize),
            ) -> Result<(), LengthMismatch> {
                rt::reference::affine(w, b, x, z)?;
                rt::reference::back(w, b, z)?;
                rt::reference::outer_acc(g, b, x)?;
                rt::reference::add_acc(g, b)?;
                rt::reference::standardize(x, b, w, z)?;
                rt::reference::affine_batch(w, b, x, z, n)?;
                rt::reference::back_batch(w, b, z, n)?;
                rt::reference::outer_acc_batch(g, b, x, n)?;
                rt::reference::outer_acc_batch_rows(g, b, x, n, rows)?;
                rt::reference::add_acc_batch(g, b)
            }
            #[export_name = concat!("sinew_k_", $tag, "_reference_loss")]
            fn reference_loss(
                z: &[T],
                y: &[T],
                a: &mut [T],
                losses: &mut [T],
                o: usize,
            ) -> Result<[T; 5], LengthMismatch> {
                rt::reference::softmax(a);
                rt::reference::softmax_grad(z, a)?;
                rt::reference::softmax_cross_entropy_batch(z, y, a, losses, o)?;
                Ok([
                    rt::reference::log_sum_exp(z),
                    rt::reference::logistic_cross_entropy(z, y)?,
                    rt::reference::softmax_cross_entropy(z, y)?,
                    rt::reference::squared_error(z, y)?,
                    rt::reference::softmax_with_cross_entropy(z, y, a)?,
                ])
            }
            #[export_name = concat!("sinew_k_", $tag, "_fold_lanes")]
            fn fold_lanes(l: [T; rt::linalg::LANES]) -> T {
                rt::linalg::fold_lanes(l, |a, b| a + b)
            }

            // act
            #[export_name = concat!("sinew_k_", $tag, "_identity")]
            fn identity(v: &mut [T]) {
                rt::act::identity(v)
            }
            #[export_name = concat!("sinew_k_", $tag, "_identity_grad")]
            fn identity_grad(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
                rt::act::identity_grad(a, d)
            }
            #[export_name = concat!("sinew_k_", $tag, "_sigmoid")]
            fn sigmoid(v: &mut [T]) {
                rt::act::sigmoid(v)
            }
            #[export_name = concat!("sinew_k_", $tag, "_sigmoid_grad")]
            fn sigmoid_grad(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
                rt::act::sigmoid_grad(a, d)
            }
            #[export_name = concat!("sinew_k_", $tag, "_tanh")]
            fn tanh(v: &mut [T]) {
                rt::act::tanh(v)
            }
            #[export_name = concat!("sinew_k_", $tag, "_tanh_grad")]
            fn tanh_grad(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
                rt::act::tanh_grad(a, d)
            }
            #[export_name = concat!("sinew_k_", $tag, "_relu")]
            fn relu(v: &mut [T]) {
                rt::act::relu(v)
            }
            #[export_name = concat!("sinew_k_", $tag, "_relu_grad")]
            fn relu_grad(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
                rt::act::relu_grad(a, d)
            }
            #[export_name = concat!("sinew_k_", $tag, "_leaky_relu")]
            fn leaky_relu(v: &mut [T], alpha: T) {
                rt::act::leaky_relu(v, alpha)
            }
            #[export_name = concat!("sinew_k_", $tag, "_leaky_relu_grad")]
            fn leaky_relu_grad(a: &[T], d: &mut [T], alpha: T) -> Result<(), LengthMismatch> {
                rt::act::leaky_relu_grad(a, d, alpha)
            }
            #[export_name = concat!("sinew_k_", $tag, "_softmax")]
            fn softmax(v: &mut [T]) {
                rt::act::softmax(v)
            }
            #[export_name = concat!("sinew_k_", $tag, "_softmax_grad")]
            fn softmax_grad(a: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
                rt::act::softmax_grad(a, d)
            }
            #[export_name = concat!("sinew_k_", $tag, "_activation_forward")]
            fn activation_forward(g: &Activation<T>, v: &mut [T]) {
                Activation::forward(g, v)
            }
            #[export_name = concat!("sinew_k_", $tag, "_activation_backward")]
            fn activation_backward(
                g: &Activation<T>,
                a: &[T],
                d: &mut [T],
            ) -> Result<(), LengthMismatch> {
                Activation::backward(g, a, d)
            }

            // linalg, slice forms
            #[export_name = concat!("sinew_k_", $tag, "_affine")]
            fn affine(w: &[T], b: &[T], x: &[T], z: &mut [T]) -> Result<(), LengthMismatch> {
                rt::linalg::affine(w, b, x, z)
            }
            #[export_name = concat!("sinew_k_", $tag, "_back")]
            fn back(w: &[T], d: &[T], out: &mut [T]) -> Result<(), LengthMismatch> {
                rt::linalg::back(w, d, out)
            }
            #[export_name = concat!("sinew_k_", $tag, "_outer_acc")]
            fn outer_acc(g: &mut [T], d: &[T], a: &[T]) -> Result<(), LengthMismatch> {
                rt::linalg::outer_acc(g, d, a)
            }
            #[export_name = concat!("sinew_k_", $tag, "_add_acc")]
            fn add_acc(g: &mut [T], d: &[T]) -> Result<(), LengthMismatch> {
                rt::linalg::add_acc(g, d)
            }
            #[export_name = concat!("sinew_k_", $tag, "_standardize")]
            fn standardize(
                x: &[T],
                mean: &[T],
                std: &[T],
                out: &mut [T],
            ) -> Result<(), LengthMismatch> {
                rt::linalg::standardize(x, mean, std, out)
            }
            #[export_name = concat!("sinew_k_", $tag, "_affine_batch")]
            fn affine_batch(
                w: &[T],
                b: &[T],
                xs: &[T],
                zs: &mut [T],
                n: usize,
            ) -> Result<(), LengthMismatch> {
                rt::linalg::affine_batch(w, b, xs, zs, n)
            }
            #[export_name = concat!("sinew_k_", $tag, "_back_batch")]
            fn back_batch(
                w: &[T],
                ds: &[T],
                outs: &mut [T],
                n: usize,
            ) -> Result<(), LengthMismatch> {
                rt::linalg::back_batch(w, ds, outs, n)
            }
            #[export_name = concat!("sinew_k_", $tag, "_outer_acc_batch")]
            fn outer_acc_batch(
                g: &mut [T],
                ds: &[T],
                xs: &[T],
                n: usize,
            ) -> Result<(), LengthMismatch> {
                rt::linalg::outer_acc_batch(g, ds, xs, n)
            }
            #[export_name = concat!("sinew_k_", $tag, "_outer_acc_batch_rows")]
            fn outer_acc_batch_rows(
                g: &mut [T],
                ds: &[T],
                xs: &[T],
                n: usize,
                rows: (usize, usize),
            ) -> Result<(), LengthMismatch> {
                rt::linalg::outer_acc_batch_rows(g, ds, xs, n, rows)
            }
            #[export_name = concat!("sinew_k_", $tag, "_add_acc_batch")]
            fn add_acc_batch(g: &mut [T], ds: &[T]) -> Result<(), LengthMismatch> {
                rt::linalg::add_acc_batch(g, ds)
            }

            // conv, slice forms
            #[export_name = concat!("sinew_k_", $tag, "_conv")]
            fn conv(
                w: &[T],
                b: &[T],
                x: &[T],
                out: &mut [T],
                g: &Window,
            ) -> Result<(), LengthMismatch> {
                rt::conv::conv(w, b, x, out, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_conv_acc")]
            fn conv_acc(
                gw: &mut [T],
                gb: &mut [T],
                err: &[T],
                x: &[T],
                g: &Window,
            ) -> Result<(), LengthMismatch> {
                rt::conv::conv_acc(gw, gb, err, x, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_conv_back")]
            fn conv_back(
                w: &[T],
                err: &[T],
                dx: &mut [T],
                g: &Window,
            ) -> Result<(), LengthMismatch> {
                rt::conv::conv_back(w, err, dx, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_depthwise")]
            fn depthwise(
                w: &[T],
                b: &[T],
                x: &[T],
                out: &mut [T],
                g: &Window,
            ) -> Result<(), LengthMismatch> {
                rt::conv::depthwise(w, b, x, out, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_depthwise_acc")]
            fn depthwise_acc(
                gw: &mut [T],
                gb: &mut [T],
                err: &[T],
                x: &[T],
                g: &Window,
            ) -> Result<(), LengthMismatch> {
                rt::conv::depthwise_acc(gw, gb, err, x, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_depthwise_back")]
            fn depthwise_back(
                w: &[T],
                err: &[T],
                dx: &mut [T],
                g: &Window,
            ) -> Result<(), LengthMismatch> {
                rt::conv::depthwise_back(w, err, dx, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_pool_max")]
            fn pool_max(x: &[T], out: &mut [T], g: &Window) -> Result<(), LengthMismatch> {
                rt::conv::pool_max(x, out, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_pool_max_back")]
            fn pool_max_back(
                x: &[T],
                err: &[T],
                dx: &mut [T],
                g: &Window,
            ) -> Result<(), LengthMismatch> {
                rt::conv::pool_max_back(x, err, dx, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_pool_average")]
            fn pool_average(x: &[T], out: &mut [T], g: &Window) -> Result<(), LengthMismatch> {
                rt::conv::pool_average(x, out, g)
            }
            #[export_name = concat!("sinew_k_", $tag, "_pool_average_back")]
            fn pool_average_back(
                err: &[T],
                dx: &mut [T],
                g: &Window,
            ) -> Result<(), LengthMismatch> {
                rt::conv::pool_average_back(err, dx, g)
            }

            // loss
            #[export_name = concat!("sinew_k_", $tag, "_softplus")]
            fn softplus(z: T) -> T {
                rt::loss::softplus(z)
            }
            #[export_name = concat!("sinew_k_", $tag, "_log_sum_exp")]
            fn log_sum_exp(z: &[T]) -> T {
                rt::loss::log_sum_exp(z)
            }
            #[export_name = concat!("sinew_k_", $tag, "_logistic_cross_entropy")]
            fn logistic_cross_entropy(z: &[T], y: &[T]) -> Result<T, LengthMismatch> {
                rt::loss::logistic_cross_entropy(z, y)
            }
            #[export_name = concat!("sinew_k_", $tag, "_softmax_cross_entropy")]
            fn softmax_cross_entropy(z: &[T], y: &[T]) -> Result<T, LengthMismatch> {
                rt::loss::softmax_cross_entropy(z, y)
            }
            #[export_name = concat!("sinew_k_", $tag, "_softmax_with_cross_entropy")]
            fn softmax_with_cross_entropy(
                z: &[T],
                y: &[T],
                a: &mut [T],
            ) -> Result<T, LengthMismatch> {
                rt::loss::softmax_with_cross_entropy(z, y, a)
            }
            #[export_name = concat!("sinew_k_", $tag, "_softmax_cross_entropy_batch")]
            fn softmax_cross_entropy_batch(
                zs: &[T],
                ys: &[T],
                as_: &mut [T],
                losses: &mut [T],
                o: usize,
            ) -> Result<(), LengthMismatch> {
                rt::loss::softmax_cross_entropy_batch(zs, ys, as_, losses, o)
            }
            #[export_name = concat!("sinew_k_", $tag, "_squared_error")]
            fn squared_error(a: &[T], y: &[T]) -> Result<T, LengthMismatch> {
                rt::loss::squared_error(a, y)
            }
            #[export_name = concat!("sinew_k_", $tag, "_output_error")]
            fn output_error(a: &[T], y: &[T], d: &mut [T]) -> Result<(), LengthMismatch> {
                rt::loss::output_error(a, y, d)
            }

            // optim
            #[export_name = concat!("sinew_k_", $tag, "_sgd")]
            fn sgd(p: &mut [T], g: &[T], rate: T) -> Result<(), LengthMismatch> {
                rt::optim::sgd(p, g, rate)
            }
            #[export_name = concat!("sinew_k_", $tag, "_momentum")]
            fn momentum(
                p: &mut [T],
                g: &[T],
                v: &mut [T],
                rate: T,
                mu: T,
            ) -> Result<(), LengthMismatch> {
                rt::optim::momentum(p, g, v, rate, mu)
            }
            #[export_name = concat!("sinew_k_", $tag, "_adam")]
            #[allow(clippy::too_many_arguments)]
            fn adam(
                p: &mut [T],
                g: &[T],
                m: &mut [T],
                v: &mut [T],
                t: u32,
                rate: T,
                beta1: T,
                beta2: T,
                eps: T,
            ) -> Result<(), LengthMismatch> {
                rt::optim::adam(p, g, m, v, t, rate, beta1, beta2, eps)
            }

            // penalty
            #[export_name = concat!("sinew_k_", $tag, "_penalty_sum")]
            fn penalty_sum(p: &Penalty<T>, w: &[T]) -> T {
                Penalty::sum(p, w)
            }
            #[export_name = concat!("sinew_k_", $tag, "_penalty_cost")]
            fn penalty_cost(p: &Penalty<T>, sum: T, m: T) -> T {
                Penalty::cost(p, sum, m)
            }
            #[export_name = concat!("sinew_k_", $tag, "_penalty_finish_weights")]
            fn penalty_finish_weights(
                p: &Penalty<T>,
                g: &mut [T],
                w: &[T],
                m: T,
            ) -> Result<(), LengthMismatch> {
                Penalty::finish_weights(p, g, w, m)
            }
            #[export_name = concat!("sinew_k_", $tag, "_finish_bias")]
            fn finish_bias(g: &mut [T], m: T) {
                rt::penalty::finish_bias(g, m)
            }

            // rng
            #[export_name = concat!("sinew_k_", $tag, "_fill_uniform")]
            fn fill_uniform(w: &mut [T], limit: f64, rng: &mut SplitMix64) {
                rt::rng::fill_uniform(w, limit, rng)
            }
            #[export_name = concat!("sinew_k_", $tag, "_fill_normal")]
            fn fill_normal(w: &mut [T], std: f64, rng: &mut SplitMix64) {
                rt::rng::fill_normal(w, std, rng)
            }

            // real: the scalar's functions
            #[export_name = concat!("sinew_k_", $tag, "_real")]
            fn real(x: T, y: T, v: f64, n: usize, k: i32, out: &mut [T; 10]) -> f64 {
                use rt::Real;
                *out = [
                    Real::from_f64(v),
                    Real::from_usize(n),
                    Real::exp(x),
                    Real::ln(x),
                    Real::ln_1p(x),
                    Real::tanh(x),
                    Real::sqrt(x),
                    Real::abs(x),
                    Real::powi(x, k),
                    Real::max(x, y),
                ];
                Real::to_f64(x)
            }

            // blob
            #[export_name = concat!("sinew_k_", $tag, "_values_open")]
            fn values_open(
                bytes: &[u8],
                fingerprint: u64,
                count: usize,
                dst: &mut [T],
            ) -> Result<usize, BlobError> {
                let mut v: Values<T> = Values::open(bytes, fingerprint, count)?;
                let n = Values::read_into(&mut v, dst);
                Ok(n + Values::remaining(&v))
            }
            #[export_name = concat!("sinew_k_", $tag, "_writer")]
            fn writer(
                out: &mut [u8],
                fingerprint: u64,
                count: usize,
                values: &[T],
            ) -> Result<usize, BlobError> {
                let mut w: Writer<T> = Writer::new(out, fingerprint, count)?;
                Writer::write(&mut w, values);
                Writer::finish(w)
            }
            #[export_name = concat!("sinew_k_", $tag, "_scalar_le")]
            fn scalar_le(v: T, out: &mut [u8]) -> T {
                use rt::blob::BlobScalar;
                BlobScalar::write_le(v, out);
                <T as BlobScalar>::read_le(out)
            }
        };
    };
}

kernels!(f32, "f32");
kernels!(f64, "f64");

// The functions of no scalar: the length rule, the window's sizes, the blob's bytes, sinew's own
// f32 functions, the generator.

#[no_mangle]
fn sinew_k_length_check(expected: usize, found: usize) -> Result<(), LengthMismatch> {
    LengthMismatch::check("operand", expected, found)
}

#[no_mangle]
fn sinew_k_window(g: &Window) -> [usize; 4] {
    [
        Window::in_len(g),
        Window::positions(g),
        Window::taps(g),
        Window::filter_len(g),
    ]
}

#[no_mangle]
fn sinew_k_crc32(bytes: &[u8]) -> u32 {
    rt::blob::crc32(bytes)
}

#[no_mangle]
fn sinew_k_crc32_parts(a: &[u8], b: &[u8]) -> u32 {
    let mut c = rt::blob::Crc32::new();
    rt::blob::Crc32::update(&mut c, a);
    rt::blob::Crc32::update(&mut c, b);
    rt::blob::Crc32::finish(c)
}

#[no_mangle]
fn sinew_k_header_parse(bytes: &[u8]) -> Result<rt::blob::Header, BlobError> {
    rt::blob::Header::parse(bytes)
}

#[no_mangle]
fn sinew_k_scalar_kind(code: u8, count: usize) -> (usize, &'static str, u8) {
    use rt::blob::ScalarKind;
    match ScalarKind::from_code(code) {
        Some(k) => (
            rt::blob::blob_bytes(k, count) + ScalarKind::bytes(k),
            ScalarKind::name(k),
            ScalarKind::code(k),
        ),
        None => (0, "", 0),
    }
}

#[no_mangle]
fn sinew_k_math(x: f32) -> (f32, f32) {
    (rt::math::expf(x), rt::math::tanhf(x))
}

#[no_mangle]
fn sinew_k_rng(seed: u64, lo: f64, hi: f64, fan_in: usize, fan_out: usize) -> [f64; 6] {
    let mut r = SplitMix64::new(seed);
    let u = SplitMix64::next_u64(&mut r) as f64;
    [
        u,
        SplitMix64::next_f64(&mut r),
        SplitMix64::uniform(&mut r, lo, hi),
        SplitMix64::normal(&mut r),
        rt::rng::glorot_limit(fan_in, fan_out),
        rt::rng::he_std(fan_in),
    ]
}

#[no_mangle]
fn sinew_k_blocks(s: &[u8], n: usize) -> usize {
    rt::each::blocks(s, n).fold(0, |acc, b| acc ^ b.len())
}
