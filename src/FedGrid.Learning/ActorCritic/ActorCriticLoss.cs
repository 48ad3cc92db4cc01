using FedGrid.Learning.Policies;

namespace FedGrid.Learning.ActorCritic;

/// <summary>
/// The per-sample losses of the advantage actor-critic and their gradients with respect to the network
/// outputs; the networks' backward passes take it from there. The actor's output for each head (household)
/// is k means followed by k raw log-std values (k actions per head): head m occupies outputs [2k·m, 2k·(m+1)).
/// </summary>
public static class ActorCriticLoss
{
    /// <summary>
    /// Actor loss  w · Σ_m Σ_j [A_m · log π(a_mj) − β · H(σ_mj)]  with A_m the (fixed) cost advantage of head m and H
    /// the pre-squash Gaussian entropy; minimising it lowers the probability of actions that cost more than expected.
    /// Writes (overwrites) ∂loss/∂output and returns the loss.
    /// </summary>
    /// <param name="output">Actor outputs of the heads concerned (2k per head).</param>
    /// <param name="preSquash">Sampled pre-squash values u (k per head).</param>
    /// <param name="advantages">Cost advantage per head.</param>
    /// <param name="lower">Lower action bounds (k per head; enter only the loss value).</param>
    /// <param name="upper">Upper action bounds (k per head).</param>
    /// <param name="actionsPerHead">k.</param>
    /// <param name="entropyCoefficient">β.</param>
    /// <param name="logStdMin">Smallest log σ.</param>
    /// <param name="logStdMax">Largest log σ.</param>
    /// <param name="weight">w, e.g. 1/T for a mean over T samples.</param>
    /// <param name="outputGradient">Receives ∂loss/∂output (same length as <paramref name="output"/>).</param>
    /// <returns>The loss value.</returns>
    public static double Actor(ReadOnlySpan<float> output, ReadOnlySpan<float> preSquash, ReadOnlySpan<float> advantages,
        ReadOnlySpan<float> lower, ReadOnlySpan<float> upper, int actionsPerHead, double entropyCoefficient,
        float logStdMin, float logStdMax, float weight, Span<float> outputGradient)
    {
        int k = actionsPerHead;
        int heads = advantages.Length;
        if (output.Length != 2 * k * heads || outputGradient.Length != output.Length || preSquash.Length != k * heads
            || lower.Length != k * heads || upper.Length != k * heads)
        {
            throw new ArgumentException("Actor loss spans do not fit the number of heads and actions per head.");
        }
        double loss = 0;
        float beta = (float)entropyCoefficient;
        for (int m = 0; m < heads; m++)
        {
            float adv = advantages[m];
            for (int j = 0; j < k; j++)
            {
                int meanIndex = 2 * k * m + j, rawIndex = 2 * k * m + k + j, a = k * m + j;
                float mean = output[meanIndex], raw = output[rawIndex];
                float logStd = SquashedGaussian.LogStd(raw, logStdMin, logStdMax);
                float u = preSquash[a];
                loss += weight * (adv * SquashedGaussian.LogProb(u, mean, logStd, lower[a], upper[a])
                                  - entropyCoefficient * SquashedGaussian.GaussianEntropy(logStd));
                SquashedGaussian.LogProbGradient(u, mean, logStd, out float dMean, out float dLogStd);
                outputGradient[meanIndex] = weight * adv * dMean;
                outputGradient[rawIndex] = weight * (adv * dLogStd - beta) * SquashedGaussian.LogStdDerivative(raw, logStdMin, logStdMax);
            }
        }
        return loss;
    }

    /// <summary>Critic loss w · Σ_m ½(V_m − R_m)²; writes (overwrites) ∂loss/∂V and returns the loss.</summary>
    /// <param name="values">Critic outputs V_m.</param>
    /// <param name="targets">Return targets R_m.</param>
    /// <param name="weight">w.</param>
    /// <param name="outputGradient">Receives w·(V_m − R_m).</param>
    /// <returns>The loss value.</returns>
    public static double Critic(ReadOnlySpan<float> values, ReadOnlySpan<float> targets, float weight, Span<float> outputGradient)
    {
        if (targets.Length != values.Length || outputGradient.Length != values.Length)
        {
            throw new ArgumentException("Critic loss spans differ in length.");
        }
        double loss = 0;
        for (int m = 0; m < values.Length; m++)
        {
            float d = values[m] - targets[m];
            loss += 0.5 * weight * d * d;
            outputGradient[m] = weight * d;
        }
        return loss;
    }
}
