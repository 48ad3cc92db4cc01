using TorchSharp;
using static TorchSharp.torch;

namespace FedGrid.Torch.Reference;

/// <summary>
/// The actor-critic losses of <see cref="FedGrid.Learning.ActorCritic.ActorCriticLoss"/> written with TorchSharp
/// operations, so that autograd differentiates the squashed-Gaussian log-probability (Jacobian correction included)
/// independently of the hand-written gradients.
/// </summary>
public static class TorchActorCriticLoss
{
    /// <summary>
    /// w · Σ_m Σ_j [A_m · log π(a_mj) − β·H_mj] for one sample; <paramref name="output"/> is the actor output [2k·heads]
    /// (per head k means then k raw log-stds), the others are constant vectors.
    /// </summary>
    /// <param name="output">Actor output (1-D, with autograd history).</param>
    /// <param name="preSquash">u per head and action [k·heads].</param>
    /// <param name="advantages">A_m per head [heads].</param>
    /// <param name="lower">Lower bounds [k·heads].</param>
    /// <param name="upper">Upper bounds [k·heads].</param>
    /// <param name="actionsPerHead">k.</param>
    /// <param name="entropyCoefficient">β.</param>
    /// <param name="logStdMin">Smallest log σ.</param>
    /// <param name="logStdMax">Largest log σ.</param>
    /// <param name="weight">w.</param>
    /// <returns>The scalar loss.</returns>
    public static Tensor Actor(Tensor output, Tensor preSquash, Tensor advantages, Tensor lower, Tensor upper,
        int actionsPerHead, double entropyCoefficient, double logStdMin, double logStdMax, double weight)
    {
        ArgumentNullException.ThrowIfNull(output);
        long heads = advantages.shape[0];
        long k = actionsPerHead;
        Tensor perHead = output.reshape(heads, 2 * k);
        Tensor mean = perHead.narrow(1, 0, k).reshape(heads * k);
        Tensor raw = perHead.narrow(1, k, k).reshape(heads * k);
        Tensor logStd = (raw.tanh() + 1.0) * (0.5 * (logStdMax - logStdMin)) + logStdMin;
        Tensor eps = (preSquash - mean) / logStd.exp();
        Tensor gaussian = eps.pow(2) * -0.5 - logStd - 0.5 * Math.Log(2 * Math.PI);
        // log(1 − tanh²u) = 2(log 2 − u − softplus(−2u))
        Tensor logJacobian = (preSquash * -1.0 - nn.functional.softplus(preSquash * -2.0) + Math.Log(2.0)) * 2.0;
        Tensor logBox = ((upper - lower) / 2.0).log();
        Tensor logProb = gaussian - logJacobian - logBox;
        Tensor entropy = logStd + (0.5 + 0.5 * Math.Log(2 * Math.PI));
        Tensor adv = advantages.repeat_interleave(k);
        return ((adv * logProb) - entropy * entropyCoefficient).sum() * weight;
    }

    /// <summary>w · Σ_m ½(V_m − R_m)².</summary>
    /// <param name="values">Critic output (1-D, with autograd history).</param>
    /// <param name="targets">Targets.</param>
    /// <param name="weight">w.</param>
    /// <returns>The scalar loss.</returns>
    public static Tensor Critic(Tensor values, Tensor targets, double weight)
    {
        ArgumentNullException.ThrowIfNull(values);
        return (values - targets).pow(2).sum() * (0.5 * weight);
    }
}
